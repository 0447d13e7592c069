"""Fixtures of the balance tests."""

from __future__ import annotations

import pytest


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
