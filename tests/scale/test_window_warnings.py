"""A window's row records the warnings of its own computation only.

A ResourceWarning is issued when the garbage collector finds a file or socket that
other code left open; it can fire inside any window (the in-process Dask scheduler
runs windows while the rest of the process collects garbage).  It must not enter the
row (the table would depend on the collector's timing) and must not be lost: it goes
on to the caller's warning filters.
"""

from __future__ import annotations

import warnings

import pytest

from perftest.scale import many


def test_resource_warning_goes_to_the_caller_not_into_the_row(monkeypatch):
    def compute(plant, run, spec, options, start=None, share=None):
        warnings.warn("a window's own note", UserWarning, stacklevel=1)
        warnings.warn("unclosed file <leaked>", ResourceWarning, stacklevel=1)
        return {"status": "ok", "reason": ""}, None

    monkeypatch.setattr(many, "_compute_row", compute)
    with pytest.warns(ResourceWarning, match="unclosed file"):
        row, rec = many._window_row(None, None, None, None)
    assert row["warnings"] == "UserWarning: a window's own note"
    assert rec is None
