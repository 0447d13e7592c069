"""Shared helpers of the robustness suite."""

from __future__ import annotations

import os
import textwrap
from pathlib import Path

import pytest

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

#: The invented demo scenario (sample_data/brackenfold).
DEMO = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"

# A minimal valid plant file: one temperature, one pressure (absolute), one flow.
PLANT = """\
[site]
name = "Robustness rig"
atmospheric_pressure = { value = 1.013, unit = "bar" }

[tags.TT-1]
quantity = "temperature"
unit = "degC"

[tags.PT-1]
unit = "bar"

[tags.FT-1]
unit = "t/h"
"""

# A small valid run file for the plant above.
RUN = """\
time,TT-1,PT-1,FT-1
2031-05-04 10:00:00,150.1,10.02,50.1
2031-05-04 10:01:00,150.3,10.01,50.0
2031-05-04 10:02:00,150.2,10.03,49.9
2031-05-04 10:03:00,150.0,10.02,50.2
"""


def write_text(folder: Path, name: str, text: str) -> Path:
    path = folder / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def write_bytes(folder: Path, name: str, data: bytes) -> Path:
    path = folder / name
    path.write_bytes(data)
    return path


@pytest.fixture
def plant_file(tmp_path) -> Path:
    return write_text(tmp_path, "plant.toml", PLANT)


@pytest.fixture(scope="session")
def demo_measurements():
    """The demo plant and its averaged measurements, as ``perftest demo`` makes them."""
    from perftest.demo import demo_measurements

    return demo_measurements()
