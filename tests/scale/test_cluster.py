"""``perftest monitor`` on a Dask cluster of separate processes (scheduler, two workers).

Outside check: the table of the cluster job is compared with the table of the same
command on the local engine (an independent code path in one process: no sockets,
no serialisation, no worker), value for value; the processes' state with the
operating system's (``os.kill(pid, 0)``).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

pytest.importorskip("distributed")

sys.path.insert(0, str(Path(__file__).resolve().parent))
from distributed import Client  # noqa: E402
from loopback import loopback_cluster  # noqa: E402

DEMO = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"
FILES = [DEMO / "historian.csv", DEMO / "logger.csv"]
# Bound of one monitor command on the 4-hour demo (about 10 s alone; a shared
# 2-core machine can be several times slower).
COMMAND_TIMEOUT = 300


def _monitor(out: Path, *extra: str) -> pd.DataFrame:
    cmd = [sys.executable, "-m", "perftest.cli", "monitor", str(DEMO / "plant.toml"),
           "--data", str(FILES[0]), "--data", str(FILES[1]), "--every", "30min",
           "--out", str(out), "--no-figures", "-q", *extra]  # fmt: skip
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=COMMAND_TIMEOUT)
    assert proc.returncode == 0, proc.stderr
    return pd.read_csv(out / "windows.csv")


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    return True


def test_monitor_on_a_loopback_cluster_equals_local(tmp_path):
    # local functions: sent by value (this module is not importable in the workers)
    def _sampling(dask_worker):
        calls = dask_worker.periodic_callbacks
        return calls["tick"].callback_time, calls["monitor"].callback_time, "profile" in calls

    def _sampling_of_scheduler(dask_scheduler):
        calls = dask_scheduler.periodic_callbacks
        return calls["tick"].callback_time, calls["monitor"].callback_time

    local = _monitor(tmp_path / "local")
    with loopback_cluster(2, log_dir=tmp_path) as address:
        assert address.startswith("tcp://127.0.0.1:")
        table = _monitor(tmp_path / "cluster", "--engine", "dask", "--scheduler", address)
        with Client(address, timeout="10s") as client:
            # `dask worker` and `dask scheduler` took README's settings from the
            # environment: ticks every 1 s, system counters every 2 s, no profiler
            sampling = client.run(_sampling)
            scheduler = client.run_on_scheduler(_sampling_of_scheduler)
    assert list(sampling.values()) == [(1000, 2000, False)] * 2
    assert scheduler == (1000, 2000)
    # the same command on both engines: the same table, to the last printed digit
    # (both write floats with repr precision)
    pd.testing.assert_frame_equal(table, local)
    assert (table["status"] == "ok").sum() + (table["status"] == "unstable").sum() >= 7
    # both workers joined the scheduler
    logs = [(tmp_path / f"worker{i}.log").read_text() for i in range(2)]
    assert all("Registered to" in text for text in logs)


def test_loopback_cluster_stops_its_processes_on_failure(tmp_path):
    import psutil

    before = {p.pid for p in psutil.Process().children(recursive=True)}
    with pytest.raises(RuntimeError, match="job failed"):  # noqa: PT012
        with loopback_cluster(2) as address:
            started = [p for p in psutil.Process().children(recursive=True)
                       if p.pid not in before]  # fmt: skip
            assert len(started) >= 3  # the scheduler and two workers (and their nannies)
            assert address
            raise RuntimeError("job failed")
    assert not any(_alive(p.pid) and p.status() != psutil.STATUS_ZOMBIE for p in started)
