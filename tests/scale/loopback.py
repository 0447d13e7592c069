"""A Dask scheduler and workers as separate processes on the loopback interface.

Used by tests/scale/test_cluster.py and benchmarks/bench_cluster.py: the same
commands a user types on a real cluster (``dask scheduler``, ``dask worker``), here
on 127.0.0.1, so that the job crosses real sockets and process boundaries (not the
in-process shortcuts of a LocalCluster).  Every process is started in its own
session and stopped at the end, also when the job fails; the scheduler stops by
itself after ``idle_timeout`` without work and the workers after ``death_timeout``
without a scheduler, should this process be killed before it can stop them.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import tempfile
import time


def worker_env(extra: dict | None = None, *, quiet: bool = True) -> dict:
    """Environment of the cluster's processes: one BLAS thread (one task thread per
    worker on a small machine), Dask's worker profiler off (it samples every thread
    ten times a second, a cost the plain process does not pay) and, if ``quiet``,
    Dask's sampling of its own event loops and system counters made less frequent
    (``perftest.scale.cluster.QUIET_SETTINGS``, as README.md advises for a cluster
    that computes perftest's windows)."""
    from perftest.scale.cluster import PROFILER_OFF, QUIET_SETTINGS, environment

    env = dict(os.environ)
    env.update(OPENBLAS_NUM_THREADS="1", OMP_NUM_THREADS="1")
    env.update(environment({**PROFILER_OFF, **(QUIET_SETTINGS if quiet else {})}))
    env.update(extra or {})
    return env


def _stop(procs, grace: float = 10.0) -> None:
    for p in procs:
        if p.poll() is None:
            with contextlib.suppress(ProcessLookupError):
                os.killpg(p.pid, signal.SIGTERM)
    deadline = time.monotonic() + grace
    for p in procs:
        try:
            p.wait(timeout=max(0.1, deadline - time.monotonic()))
        except subprocess.TimeoutExpired:
            with contextlib.suppress(ProcessLookupError):
                os.killpg(p.pid, signal.SIGKILL)
            p.wait(timeout=grace)


@contextlib.contextmanager
def loopback_cluster(n_workers: int = 2, *, start_timeout: float = 60.0, log_dir=None,
                     worker_args=(), env_extra=None, quiet=True):  # fmt: skip
    """Context: ``tcp://127.0.0.1:P`` of a scheduler with ``n_workers`` one-thread workers.

    Parameters
    ----------
    n_workers : int
        Worker processes (``dask worker --nthreads 1``).
    start_timeout : float [s]
        Time allowed for the scheduler to answer and every worker to join.
    log_dir : path, optional
        Folder for the processes' output (discarded when None).
    worker_args : sequence of str
        Further ``dask worker`` options (e.g. ``--memory-limit``).
    env_extra : dict, optional
        Further environment variables of the cluster's processes.
    quiet : bool
        Start the processes with perftest's settings for Dask's own sampling
        (``worker_env``); False: Dask's defaults (the worker profiler stays off).
    """
    from distributed import Client

    env = worker_env(env_extra, quiet=quiet)
    procs = []
    logs = []

    def start(args, name):
        if log_dir is None:
            out = subprocess.DEVNULL
        else:
            out = open(os.path.join(log_dir, f"{name}.log"), "w")  # noqa: SIM115
            logs.append(out)
        procs.append(
            subprocess.Popen(
                [sys.executable, "-m", "dask", *args],
                env=env,
                stdout=out,
                stderr=subprocess.STDOUT,
                start_new_session=True,
            )  # fmt: skip
        )

    # The scheduler binds a port of the system's choice (port 0) and writes its address
    # to a file the workers read: no port is picked here that another program on a
    # shared machine could take before the scheduler binds it.
    folder = tempfile.TemporaryDirectory(prefix="perftest-loopback-")
    info = os.path.join(folder.name, "scheduler.json")
    try:
        start(["scheduler", "--host", "127.0.0.1", "--port", "0", "--no-dashboard",
               "--scheduler-file", info, "--idle-timeout", "600s"], "scheduler")  # fmt: skip
        for i in range(n_workers):
            start(["worker", "--scheduler-file", info, "--nthreads", "1", "--nworkers", "1",
                   "--no-dashboard", "--death-timeout", "60s", "--name", f"w{i}",
                   *worker_args], f"worker{i}")  # fmt: skip
        deadline = time.monotonic() + start_timeout
        while True:
            try:
                with open(info) as f:
                    address = json.load(f)["address"]
                break
            except (OSError, ValueError, KeyError):  # not (fully) written yet
                if time.monotonic() > deadline or procs[0].poll() is not None:
                    raise RuntimeError(
                        f"the loopback scheduler did not write {info} within "
                        f"{start_timeout:.0f} s (exit code {procs[0].poll()})"
                    ) from None
                time.sleep(0.2)
        while True:
            try:
                with Client(address, timeout="5s") as client:
                    client.wait_for_workers(
                        n_workers, timeout=max(1.0, deadline - time.monotonic())
                    )
                break
            except (OSError, TimeoutError):
                if time.monotonic() > deadline or any(p.poll() is not None for p in procs):
                    raise RuntimeError(
                        f"the loopback cluster at {address} did not start within "
                        f"{start_timeout:.0f} s (exit codes {[p.poll() for p in procs]})"
                    ) from None
                time.sleep(0.5)
        yield address
    finally:
        _stop(procs[1:])  # workers first, so that none reconnects to a new scheduler
        _stop(procs[:1])
        for f in logs:
            f.close()
        folder.cleanup()
