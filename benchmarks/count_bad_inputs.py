"""Count the malformed-input cases of the robustness suite per layer, and run them.

Collects tests/robustness/test_bad_input_<layer>.py with pytest, counts the test
cases (each parametrised row is one malformed input with its expected error class
and message fragment), runs them, and prints per layer how many there are and how
many gave their intended error (passed).  The other robustness files (property-based,
audit, safety, numerical, reproducibility, invariance) are counted on a second list.

Run:  python benchmarks/count_bad_inputs.py
Exit status 0 when every case passed.
"""

from __future__ import annotations

import os
import sys
from collections import Counter
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SUITE = ROOT / "tests" / "robustness"


class _Recorder:
    """pytest plugin: outcome of every test call."""

    def __init__(self):
        self.outcomes: dict[str, str] = {}

    def pytest_runtest_logreport(self, report):
        if report.when == "call" or (report.when == "setup" and report.outcome != "passed"):
            self.outcomes[report.nodeid] = report.outcome


# Tests in the truth-table files that check input that must be *accepted* (bad cells
# masked and recorded, a BOM, code-like text kept as text, states near saturation):
# counted apart from the malformed inputs that must be refused.
_ACCEPTED = (
    "masked",
    "records",
    "logged",
    "is_valid",
    "accepted",
    "stays_text",
    "finite",
    "nan_marks",
)


def _accepted(nodeid: str) -> bool:
    func = nodeid.split("::")[-1].split("[")[0]
    return any(word in func for word in _ACCEPTED)


def _layer(nodeid: str) -> str:
    name = nodeid.split("::")[0].rsplit("/", 1)[-1].removesuffix(".py")
    return name.removeprefix("test_bad_input_") if name.startswith("test_bad_input_") else name


def main() -> int:
    import pytest

    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    rec = _Recorder()
    status = pytest.main(
        [str(SUITE), "-q", "-p", "no:cacheprovider", "--no-header", "-o", "addopts="],
        plugins=[rec],
    )
    bad = Counter()
    bad_ok = Counter()
    kept = Counter()
    kept_ok = Counter()
    other = Counter()
    other_ok = Counter()
    for nodeid, outcome in rec.outcomes.items():
        layer = _layer(nodeid)
        if "/test_bad_input_" in nodeid and _accepted(nodeid):
            total, ok = kept, kept_ok
        elif "/test_bad_input_" in nodeid:
            total, ok = bad, bad_ok
        else:
            total, ok = other, other_ok
        total[layer] += 1
        if outcome == "passed":
            ok[layer] += 1
    print()
    print("Malformed-input truth tables (tests/robustness/test_bad_input_<layer>.py)")
    print(f"  {'layer':<16}{'refused':>9}{'intended error':>16}{'accepted':>10}{'as intended':>13}")
    for layer in sorted(bad):
        print(
            f"  {layer:<16}{bad[layer]:>9}{bad_ok[layer]:>16}{kept[layer]:>10}{kept_ok[layer]:>13}"
        )
    print(
        f"  {'total':<16}{sum(bad.values()):>9}{sum(bad_ok.values()):>16}"
        f"{sum(kept.values()):>10}{sum(kept_ok.values()):>13}"
    )
    print(
        "  (refused: malformed input that must raise its error class with its message "
        "fragment; accepted: bad cells masked and recorded, odd but valid input kept)"
    )
    print()
    print("Other robustness tests")
    for layer in sorted(other):
        print(f"  {layer:<28}{other[layer]:>5} tests, {other_ok[layer]:>5} passed")
    every = all(
        sum(t.values()) == sum(o.values())
        for t, o in ((bad, bad_ok), (kept, kept_ok), (other, other_ok))
    )
    print()
    print(("PASS" if every and status == 0 else "FAIL") + ": every case gave its intended result")
    return 0 if every and status == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
