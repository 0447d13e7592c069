"""Shared test set-up: makes ``tests/`` importable so that helpers such as
``standin`` can be imported from test files in any sub-folder; shared fixtures."""

import sys
from pathlib import Path

import pytest

_TESTS = str(Path(__file__).resolve().parent)
if _TESTS not in sys.path:
    sys.path.insert(0, _TESTS)


@pytest.fixture
def refine_calls(monkeypatch):
    """The outcomes of ``_kkt.Reuse.refine`` (True: a step from the kept factor) in order."""
    from perftest.balance import _kkt

    calls = []
    refine = _kkt.Reuse.refine

    def spy(self, *args):
        out = refine(self, *args)
        calls.append(out is not None)
        return out

    monkeypatch.setattr(_kkt.Reuse, "refine", spy)
    return calls
