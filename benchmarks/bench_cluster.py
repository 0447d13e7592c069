"""Monitoring on a Dask cluster of separate processes: parallel efficiency on 2 workers.

Run:  python benchmarks/bench_cluster.py [--days 365] [--repeat 1] [--dask-defaults]

The logs are those of benchmarks/bench_year.py (the Brackenfold demo unit, one
sample a minute, ``--days`` days, 15-minute windows).  A scheduler and two workers
are started as separate processes on 127.0.0.1 (``dask scheduler``, ``dask worker
--nthreads 1``; tests/scale/loopback.py) with the settings README.md gives for a
cluster that computes perftest's windows: the worker profiler off and Dask's
sampling of its own event loops and system counters every 1 s and 2 s instead of
20 ms and 500 ms (``perftest.scale.cluster.QUIET_SETTINGS``); they are stopped at
the end, also on failure.  Measured in one run, with the load average beside each
figure (the machine may be shared: repeat and compare the spread):

* the plain process: ``reconcile_many`` on the local engine in a child process
  (windows/s and windows per CPU-second);
* two plain processes at once, each on half of the days (what two cores give
  without Dask: the ceiling set by the machine and its other users);
* the cluster: ``reconcile_many(..., engine="dask", scheduler="tcp://127.0.0.1:P")``
  on warm workers (a short job first), windows/s, windows per worker CPU-second,
  and where the task time goes (Dask's task stream: compute, transfer,
  deserialisation; worker memory limit and spilled bytes); then the CPU its
  processes use while idle for 10 s;
* ``perftest monitor --engine dask --scheduler tcp://127.0.0.1:P`` once, timed,
  its table compared with the local engine's;
* with ``--dask-defaults``, the same job on a second cluster started with Dask's
  default sampling intervals (the profiler still off), for comparison.

Target (PASS/FAIL printed): parallel efficiency = windows/s on 2 workers /
(2 x windows/s of the plain process) >= 0.85.  Printed beside it: the same against
the two-plain-processes ceiling (the part of the loss Dask is responsible for).

The plain process is timed twice, before and after the cluster(s), and the
efficiency is taken against the mean of the two: on a shared machine the speed of
one process drifts by several per cent over the minutes a year takes (measured
here: 110.7 and 118.6 windows/s for the same job in two sessions, and 117.0 before
and 107.0 after the cluster in one run), and a single reference taken before would
put all of that drift into the ratio.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse  # noqa: E402
import json  # noqa: E402
import resource  # noqa: E402
import shutil  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import pandas as pd  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parent / "tests" / "scale"))

import bench_year as by  # noqa: E402
from loopback import loopback_cluster, worker_env  # noqa: E402

TARGET = 0.85


def _cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_SELF)
    return r.ru_utime + r.ru_stime


def child(args) -> None:
    """The local engine in this process: seconds, CPU seconds, windows."""
    t, c = time.perf_counter(), _cpu()
    table = by._job(args.plant, args.files)
    out = {"seconds": time.perf_counter() - t, "cpu": _cpu() - c, "windows": len(table)}
    if args.table:
        table.to_parquet(args.table)
    print(json.dumps(out))


def _local(plant, files, table=None):
    cmd = [sys.executable, __file__, "--child", "--plant", str(plant), "--files",
           *map(str, files)] + (["--table", str(table)] if table else [])  # fmt: skip
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, text=True, env=worker_env())


def _result(proc):
    out, _ = proc.communicate(timeout=7200)
    if proc.returncode:
        raise RuntimeError(f"child failed with exit code {proc.returncode}")
    return json.loads(out.strip().splitlines()[-1])


def _worker_state(dask_worker):
    """CPU seconds, memory limit and keys spilled to disk of a worker (run on each)."""
    import resource as res

    r = res.getrusage(res.RUSAGE_SELF)
    w = dask_worker
    slow = getattr(getattr(w, "data", None), "slow", None)
    spilled = 0 if slow is None else len(slow)
    return {"cpu": r.ru_utime + r.ru_stime, "memory_limit": w.memory_manager.memory_limit,
            "spilled": spilled}  # fmt: skip


def _split(days_dir: Path, days: int, halves: Path) -> list[list[Path]]:
    """The logs cut into two halves of whole days (for the two-plain-processes run)."""
    out = []
    files = [days_dir / "historian.csv", days_dir / "logger.csv"]
    cut = days // 2 * 1440
    for i, (lo, hi) in enumerate(((0, cut), (cut, None))):
        d = halves / f"half{i}"
        d.mkdir()
        for f in files:
            lines = f.read_text().splitlines(keepends=True)
            head = 2 if f.name == "historian.csv" else 1
            body = lines[head:]
            (d / f.name).write_text("".join(lines[:head] + body[lo:hi]))
        out.append([d / f.name for f in files])
    return out


def _cluster_run(address, plant, files, short):
    from distributed import Client

    with Client(address, timeout="30s") as client:
        by._job(plant, short, engine="dask", scheduler=client)  # warm-up
        before = client.run(_worker_state)
        t = time.perf_counter()
        with _task_stream(client) as ts:
            table = by._job(plant, files, engine="dask", scheduler=client)
        seconds = time.perf_counter() - t
        after = client.run(_worker_state)
    cpu = sum(after[w]["cpu"] - before[w]["cpu"] for w in after)
    parts: dict = {}
    tasks = 0
    for task in ts.data:
        tasks += 1
        for ss in task.get("startstops", ()):
            parts[ss["action"]] = parts.get(ss["action"], 0.0) + ss["stop"] - ss["start"]
    mem = {w: (s["memory_limit"], s["spilled"]) for w, s in after.items()}
    return table, seconds, cpu, parts, tasks, mem


IDLE_SECONDS = 10.0


def _idle_cost(seconds: float = IDLE_SECONDS) -> str:
    """CPU-seconds the cluster's processes (children of this one: scheduler, nannies,
    workers) use while the cluster waits for work, over ``seconds``."""
    import psutil

    def cpu():
        out = 0.0
        for p in psutil.Process().children(recursive=True):
            try:
                t = p.cpu_times()
            except psutil.Error:
                continue
            out += t.user + t.system
        return out

    time.sleep(2.0)  # the job's last messages
    c0 = cpu()
    time.sleep(seconds)
    used = cpu() - c0
    return f"{used:.2f} CPU-s ({used / seconds:.1%} of one core)"


def _monitor_cli(plant, full, out, address) -> tuple[bool, str]:
    """``perftest monitor --engine dask --scheduler ADDRESS`` once, timed: (ok, line)."""
    cmd = [sys.executable, "-m", "perftest.cli", "monitor", str(plant), "--data",
           str(full[0]), "--data", str(full[1]), "--every", by.EVERY, "--out",
           str(out), "--no-figures", "-q", "--engine", "dask",
           "--scheduler", address]  # fmt: skip
    t = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=7200)
    took = time.perf_counter() - t
    if proc.returncode:
        return False, "    perftest monitor failed: " + proc.stderr.strip()[-300:]
    n = len(pd.read_csv(out / "windows.csv"))
    return True, (f"    perftest monitor --engine dask --scheduler {address}: "
                  f"{n} windows in {took:.1f} s (with start-up and writing) "
                  f"= {n / took:.2f} windows/s")  # fmt: skip


def _task_stream(client):
    from distributed import get_task_stream

    return get_task_stream(client)


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--days", type=int, default=365, help="days of logs (default 365)")
    p.add_argument("--repeat", type=int, default=1, help="measurements of each figure")
    p.add_argument(
        "--worker-arg",
        action="append",
        default=[],
        metavar="OPT",
        help="a further 'dask worker' option, e.g. --worker-arg=--memory-limit=0",
    )
    p.add_argument(
        "--dask-defaults",
        action="store_true",
        help="also time the job on a cluster with Dask's default sampling intervals",
    )
    p.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    p.add_argument("--plant", help=argparse.SUPPRESS)
    p.add_argument("--table", help=argparse.SUPPRESS)
    p.add_argument("--files", nargs="*", help=argparse.SUPPRESS)
    args = p.parse_args()
    if args.child:
        child(args)
        return
    plant = by.DEMO / "plant.toml"
    tmp = Path(tempfile.mkdtemp(prefix="perftest-cluster-"))
    ok = True
    try:
        (tmp / "full").mkdir()
        (tmp / "short").mkdir()
        full = by.generate(tmp / "full", args.days)
        short = by.generate(tmp / "short", 2)
        halves = _split(tmp / "full", args.days, tmp)
        print(f"{args.days} days of 1-minute logs; {by._load()}")
        effs = []
        for rep in range(args.repeat):
            plain = _result(_local(plant, full, tmp / "local.parquet"))
            rate1 = plain["windows"] / plain["seconds"]
            print(f"[{rep + 1}] plain process: {plain['windows']} windows in "
                  f"{plain['seconds']:.1f} s = {rate1:.2f} windows/s, "
                  f"{plain['windows'] / plain['cpu']:.2f} windows per CPU-second  "
                  f"[{by._load()}]")  # fmt: skip
            pair = [_local(plant, h) for h in halves]
            pair = [_result(q) for q in pair]
            # each child times its own job (start-up and imports excluded, as for the
            # plain process); the pair is done when the slower one is
            rate2p = sum(q["windows"] for q in pair) / max(q["seconds"] for q in pair)
            per_cpu = sum(q["windows"] for q in pair) / sum(q["cpu"] for q in pair)
            print(f"    two plain processes at once: {rate2p:.2f} windows/s "
                  f"({rate2p / (2 * rate1):.2f} of 2x one), {per_cpu:.2f} windows per "
                  f"CPU-second  [{by._load()}]")  # fmt: skip
            with loopback_cluster(2, log_dir=tmp, worker_args=args.worker_arg) as address:
                table, seconds, cpu, parts, tasks, mem = _cluster_run(address, plant, full, short)
                idle = _idle_cost()
                cli = _monitor_cli(plant, full, tmp / "monitor", address) if rep == 0 else None
            defaults = None
            if args.dask_defaults:
                logs = tmp / f"dask-defaults-{rep}"  # its own logs beside the first's
                logs.mkdir()
                with loopback_cluster(2, log_dir=logs, worker_args=args.worker_arg,
                                      quiet=False) as address:  # fmt: skip
                    defaults = _cluster_run(address, plant, full, short)[:3] + (_idle_cost(),)
            after = _result(_local(plant, full))
            rate1b = after["windows"] / after["seconds"]
            print(f"    plain process again, after the cluster: {rate1b:.2f} windows/s "
                  f"(before {rate1:.2f}); reference: their mean  [{by._load()}]")  # fmt: skip
            rate1 = 0.5 * (rate1 + rate1b)
            plain_cpu = (plain["windows"] + after["windows"]) / (plain["cpu"] + after["cpu"])
            rate_d = len(table) / seconds
            eff = rate_d / (2 * rate1)
            effs.append(eff)
            same = by._compare(table, pd.read_parquet(tmp / "local.parquet"))
            print(f"    loopback cluster, 2 workers: {len(table)} windows in {seconds:.1f} s"
                  f" = {rate_d:.2f} windows/s, {len(table) / cpu:.2f} windows per worker "
                  f"CPU-second; identical to local: {same}")  # fmt: skip
            busy = sum(parts.values())
            split = ", ".join(f"{k} {v:.1f} s" for k, v in sorted(parts.items()))
            print(f"    tasks {tasks} (one a day), task time {busy:.1f} s: {split}; "
                  f"worker CPU {cpu:.1f} s over 2 x {seconds:.1f} s wall")  # fmt: skip
            print("    workers (memory limit [MiB], spilled keys): " + ", ".join(
                f"{m / 2**20:.0f}, {s}" for m, s in mem.values()))  # fmt: skip
            print(f"    the cluster's processes idle for {IDLE_SECONDS:.0f} s: {idle}")
            cpu_eff = (len(table) / cpu) / plain_cpu
            print(
                f"    windows per CPU-second, workers / plain process: {cpu_eff:.2f} "
                "(Dask's own cost per window, whatever the machine's load)"
            )
            print(f"    parallel efficiency {eff:.2f} (target >= {TARGET}) "
                  f"{'PASS' if eff >= TARGET else 'FAIL'}; against two plain processes "
                  f"{rate_d / rate2p:.2f}")  # fmt: skip
            ok &= eff >= TARGET and same == "True"
            if cli is not None:
                ok &= cli[0]
                print(cli[1])
            if defaults is not None:
                t_d, s_d, c_d, idle_d = defaults
                same_d = by._compare(t_d, pd.read_parquet(tmp / "local.parquet"))
                print(f"    for comparison, Dask's default sampling intervals (profiler off): "
                      f"{len(t_d) / s_d:.2f} windows/s, {len(t_d) / c_d:.2f} windows per "
                      f"worker CPU-second, efficiency {len(t_d) / s_d / (2 * rate1):.2f}; "
                      f"identical to local: {same_d}; idle for {IDLE_SECONDS:.0f} s: "
                      f"{idle_d}")  # fmt: skip
        if len(effs) > 1:
            print(f"parallel efficiency over {len(effs)} runs: min {min(effs):.2f}, "
                  f"max {max(effs):.2f}")  # fmt: skip
        print("overall:", "PASS" if ok else "FAIL")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
