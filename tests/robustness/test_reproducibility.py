"""Same inputs, same numbers: summary.json is bit-identical between two runs of the
demo, apart from the fields that say when and with what software it was made.

Fields left out of the comparison, and why:

- ``timings``: seconds per stage, measured by the clock;
- ``perftest_version`` and ``audit.versions``: the software that ran;
- ``audit.created``: the time the audit record was made.

Everything else, every number included, must match byte for byte.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import warnings

import pytest

import perftest
from perftest.demo import run_demo

VOLATILE_TOP = ("timings", "perftest_version")
VOLATILE_AUDIT = ("created", "versions")


def stable_bytes(path) -> bytes:
    d = json.loads(path.read_text(encoding="utf-8"))
    for k in VOLATILE_TOP:
        d.pop(k, None)
    for k in VOLATILE_AUDIT:
        d.get("audit", {}).pop(k, None)
    return json.dumps(d, indent=2, allow_nan=False, ensure_ascii=False).encode("utf-8")


def test_volatile_fields_are_all_there(tmp_path):
    # the comparison below drops these: they must exist (else the list is stale)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_demo(tmp_path, figures=False)
    d = json.loads((tmp_path / "summary.json").read_text(encoding="utf-8"))
    for k in VOLATILE_TOP:
        assert k in d
    for k in VOLATILE_AUDIT:
        assert k in d["audit"]


def test_demo_in_process_twice_is_identical(tmp_path):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_demo(tmp_path / "a", figures=False)
        run_demo(tmp_path / "b", figures=False)
    a = stable_bytes(tmp_path / "a" / "summary.json")
    b = stable_bytes(tmp_path / "b" / "summary.json")
    assert a == b
    assert b'"results"' in a and len(a) > 2000  # a real summary was compared


def test_demo_command_twice_is_identical(tmp_path):
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    for name in ("one", "two"):
        proc = subprocess.run(
            [
                sys.executable,
                "-m",
                "perftest.cli",
                "demo",
                "-q",
                "--no-figures",
                "--out",
                str(tmp_path / name),
            ],
            capture_output=True,
            text=True,
            env=env,
            timeout=300,
        )
        assert proc.returncode == 0, proc.stderr
    assert stable_bytes(tmp_path / "one" / "summary.json") == stable_bytes(
        tmp_path / "two" / "summary.json"
    )


@pytest.fixture(scope="module")
def reconciled(demo_measurements):
    plant, m = demo_measurements
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rec = perftest.reconcile(plant, m, eliminate=True)
    return plant, rec


def test_monte_carlo_is_seeded(reconciled):
    plant, rec = reconciled
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        a = perftest.evaluate(plant, rec, seed=11).monte_carlo
        b = perftest.evaluate(plant, rec, seed=11).monte_carlo
        c = perftest.evaluate(plant, rec, seed=12).monte_carlo
    assert a is not None and not a.empty
    assert a.equals(b)  # same seed: identical draws
    assert not a.equals(c)  # another seed: other draws (the seed is really used)
