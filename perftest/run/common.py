"""Small helpers shared by the modules of :mod:`perftest.run` (no Run import here)."""

from __future__ import annotations

from collections.abc import Mapping

import pandas as pd

__all__ = [
    "EXCLUSION_COLUMNS",
    "PERCENT_KINDS",
    "CHECK_BYTES",
    "field",
    "fmt_time",
    "empty_exclusions",
    "column_list",
]

EXCLUSION_COLUMNS = ("time", "tag", "reason", "raw_value", "source")

PERCENT_KINDS = {"percent", "percent_of_reading", "relative"}

# bytes handled at a time by the column-wise loops (the mask check of Run(), the
# neighbours' median of screen_outliers): bounds their temporaries to a few MB
CHECK_BYTES = 1 << 22


def field(obj, name, default=None):
    """``obj[name]`` for a mapping, ``obj.name`` otherwise; ``default`` when absent or None obj."""
    if obj is None:
        return default
    if isinstance(obj, Mapping):
        return obj.get(name, default)
    return getattr(obj, name, default)


def empty_exclusions() -> pd.DataFrame:
    """An exclusions table with no row and the documented columns."""
    return pd.DataFrame(
        {
            "time": pd.Series([], dtype="datetime64[ns, UTC]"),
            "tag": pd.Series([], dtype=object),
            "reason": pd.Series([], dtype=object),
            "raw_value": pd.Series([], dtype=object),
            "source": pd.Series([], dtype=object),
        }
    )


def fmt_time(t) -> str:
    """ISO text of a time, ``"None"`` for None."""
    return "None" if t is None else pd.Timestamp(t).isoformat()


# the last few column Indexes seen by column_list (a run's data and mask have one
# each) and their labels
_LAST_COLUMNS: tuple = ()


def column_list(columns: pd.Index) -> list:
    """``list(columns)`` for a frame's column Index, remembered for the last few seen.

    Listing an Index of strings costs about as much as averaging a few tags, and the
    windows of one run carry views of one column Index (``Index.is_``: the same
    labels, an Index being immutable).  A new list is returned each time.
    """
    global _LAST_COLUMNS
    seen = _LAST_COLUMNS
    for index, labels in seen:
        if index.is_(columns):
            return list(labels)
    labels = list(columns)
    _LAST_COLUMNS = ((columns, tuple(labels)), *seen[:3])
    return labels
