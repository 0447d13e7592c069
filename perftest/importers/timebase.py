"""Time stamps of run files: parsing, time zones, order, duplicates, gaps and alignment.

Rules (also in docs/run-files.md):

* Stamps with an offset (``+01:00``, ``Z``) are honoured.  Naive stamps are local
  time of the zone given to ``read_run`` (or the plant's ``site.timezone``,
  default UTC).  A file must not mix the two.
* At the autumn clock change a naive local hour repeats; the repeat is resolved by
  the order of the rows (first pass daylight time, second pass standard time).
  When the order does not tell (the hour appears once) or a stamp falls in the
  spring gap, the import stops naming the line.
* Everything is converted to UTC.
* Rows must go forward in time.  A repeated stamp is a duplicate: the first row is
  kept, the later ones are excluded and recorded.  A stamp earlier than the one
  before it stops the import: it usually means two exports pasted together or a
  logger clock reset, and sorting would hide that.
* A gap is an interval longer than 1.5 times the file's median interval.
"""

from __future__ import annotations

import re
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perftest.errors import DataError

__all__ = ["TimeInfo", "parse_times", "median_interval", "align"]

_OFFSET = re.compile(r"(?:Z|[+-]\d{2}:?\d{2})$", re.IGNORECASE)
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}")
_DOTTED_DATE = re.compile(r"^\d{1,2}\.\d{1,2}\.\d{2,4}")
GAP_FACTOR = 1.5


@dataclass
class TimeInfo:
    """Parsed stamps of one file (rows as read, duplicates included)."""

    times: pd.DatetimeIndex  # UTC, one per row as read
    keep: np.ndarray  # bool: first occurrence of each stamp
    duplicate_rows: np.ndarray  # row indices of later duplicates
    duplicate_of: np.ndarray  # row index of the kept row for each duplicate
    gaps: list[tuple[pd.Timestamp, pd.Timedelta, int]]  # (stamp before, length, row after)
    median: pd.Timedelta | None
    zone_rule: str


def _first(mask: np.ndarray) -> int:
    return int(np.argmax(mask))


def parse_times(texts: np.ndarray, *, layout, column: str, timezone: str, line_of) -> TimeInfo:
    """Parse the time column of one file into UTC stamps.

    Parameters
    ----------
    texts : array_like or Series of str
        Cells of the time column (or ``date + " " + time``), one per data row.
    layout : FileLayout
        For messages.
    column : str
        Name of the time column, for messages.
    timezone : str
        IANA zone of naive stamps.
    line_of : callable
        ``line_of(rows) -> ndarray`` file line numbers of data rows.

    Raises
    ------
    DataError
        Blank or unparseable stamp, mixed offset/naive stamps, ambiguous or
        nonexistent local time, ambiguous day/month order, a stamp going backwards.
    """
    s = pd.Series(texts, dtype="str").str.strip()  # pyarrow-backed: vectorised text ops
    where = layout.where

    blank = (s == "").to_numpy()
    if blank.any():
        row = _first(blank)
        line = int(line_of([row])[0])
        raise DataError(
            f"{where(line, column)}: the time stamp is empty. Fill it in or delete the row.",
            file=layout.path,
            line=line,
            column=column,
        )
    has_offset = s.str.contains(_OFFSET.pattern, case=False).to_numpy(dtype=bool)
    if has_offset.any() and not has_offset.all():
        row = _first(has_offset != has_offset[0])
        line = int(line_of([row])[0])
        raise DataError(
            f"{where(line, column)}: the stamp {s.iloc[row]!r} "
            f"{'has no' if has_offset[0] else 'has a'} UTC offset but the first stamp "
            f"{s.iloc[0]!r} {'has one' if has_offset[0] else 'does not'}. Write all stamps "
            "of a file the same way (all with offsets, or all in one local zone).",
            file=layout.path,
            line=line,
            column=column,
        )
    aware = bool(has_offset[0])
    parsed = _parse(s, aware, layout, column, line_of)
    if aware:
        idx = pd.DatetimeIndex(parsed).tz_convert("UTC")
        rule = "UTC offsets written in the stamps"
    else:
        idx = _localize(pd.DatetimeIndex(parsed), timezone, layout, column, line_of)
        rule = f"local time of {timezone}"
    idx = idx.as_unit("ns")
    idx.name = "time"

    t = idx.asi8
    d = np.diff(t)
    back = d < 0
    if back.any():
        i = _first(back)
        lines = line_of([i, i + 1])
        raise DataError(
            f"{where(int(lines[1]), column)}: the time stamp {s.iloc[i + 1]!r} is earlier than "
            f"{s.iloc[i]!r} on line {int(lines[0])}. Rows must go forward in time; the file "
            "may hold two exports pasted together or a clock reset. Sort the file by time "
            "(if that is right) or split it into two files.",
            file=layout.path,
            line=int(lines[1]),
            column=column,
        )
    dup = d == 0
    keep = np.ones(t.size, bool)
    keep[1:] = ~dup
    dup_rows = np.flatnonzero(~keep)
    # the kept row of a run of equal stamps is the last kept row before it
    kept_pos = np.maximum.accumulate(np.where(keep, np.arange(t.size), 0))
    dup_of = kept_pos[dup_rows]

    pos = d[d > 0]
    median = pd.Timedelta(int(np.median(pos)), "ns") if pos.size else None
    gaps = []
    if median is not None:
        big = np.flatnonzero(d > GAP_FACTOR * median.value)
        for i in big:
            gaps.append((idx[i], pd.Timedelta(int(d[i]), "ns"), int(i + 1)))
    return TimeInfo(idx, keep, dup_rows, dup_of, gaps, median, rule)


def _parse(s: pd.Series, aware: bool, layout, column, line_of) -> pd.Series:
    # pandas warns when it falls back to per-element parsing; the checks below
    # (NaT -> line named, day/month ambiguity -> error) are what the user sees
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", UserWarning)
        return _parse_formats(s, aware, layout, column, line_of)


def _parse_formats(s: pd.Series, aware: bool, layout, column, line_of) -> pd.Series:
    first = s.iloc[0]
    if _ISO_DATE.match(first):
        try:
            return pd.to_datetime(s, format="ISO8601", utc=aware)
        except (ValueError, TypeError):
            pass  # fall through to the checks below, which name the line
        out = pd.to_datetime(s, format="ISO8601", utc=aware, errors="coerce")
        return _check_nat(out, s, layout, column, line_of)
    if _DOTTED_DATE.match(first):
        # dotted numeric dates are day.month.year where they are written;
        # common practice, no source
        out = pd.to_datetime(s, dayfirst=True, utc=aware, errors="coerce")
        return _check_nat(out, s, layout, column, line_of)
    month_first = pd.to_datetime(s, dayfirst=False, utc=aware, errors="coerce")
    day_first = pd.to_datetime(s, dayfirst=True, utc=aware, errors="coerce")
    ok_m = bool(month_first.notna().all())
    ok_d = bool(day_first.notna().all())
    if ok_m and ok_d:
        if not month_first.equals(day_first):
            raise DataError(
                f"{layout.where(column=column)}: dates such as {first!r} can be read "
                "day-first or month-first and both give valid stamps. Write the stamps as "
                "ISO 8601 (2024-03-01 10:00:00) or with the month name.",
                file=layout.path,
                column=column,
            )
        return month_first
    if ok_d:
        return day_first
    return _check_nat(month_first, s, layout, column, line_of)


def _check_nat(out: pd.Series, s: pd.Series, layout, column, line_of) -> pd.Series:
    nat = out.isna().to_numpy()
    if nat.any():
        row = _first(nat)
        line = int(line_of([row])[0])
        raise DataError(
            f"{layout.where(line, column)}: cannot read {s.iloc[row]!r} as a date and time. "
            "Write stamps as ISO 8601 (2024-03-01 10:00:00, optionally with +01:00), or name "
            "the right column with time_column=.",
            file=layout.path,
            line=line,
            column=column,
        )
    return out


def _localize(idx: pd.DatetimeIndex, tz: str, layout, column, line_of) -> pd.DatetimeIndex:
    try:
        return idx.tz_localize(tz, ambiguous="raise", nonexistent="raise").tz_convert("UTC")
    except ValueError:
        pass
    nonexist = idx.tz_localize(tz, ambiguous="NaT", nonexistent="NaT").isna()
    amb_true = idx.tz_localize(tz, ambiguous=np.ones(len(idx), bool), nonexistent="NaT")
    amb_false = idx.tz_localize(tz, ambiguous=np.zeros(len(idx), bool), nonexistent="NaT")
    missing = np.asarray(amb_true.isna() & amb_false.isna())
    if missing.any():
        row = _first(missing)
        line = int(line_of([row])[0])
        raise DataError(
            f"{layout.where(line, column)}: the local time {str(idx[row])!r} does not exist in "
            f"{tz} (spring clock change). Export the log in UTC or with UTC offsets, or pass "
            "the zone the logger really used (timezone=).",
            file=layout.path,
            line=line,
            column=column,
        )
    try:
        return idx.tz_localize(tz, ambiguous="infer", nonexistent="raise").tz_convert("UTC")
    except ValueError:
        amb = np.asarray(nonexist) & ~missing
        row = _first(amb)
        line = int(line_of([row])[0])
        raise DataError(
            f"{layout.where(line, column)}: the local time {str(idx[row])!r} occurs twice in "
            f"{tz} (autumn clock change) and the order of the rows does not tell which is "
            "meant. Export the log in UTC or with UTC offsets.",
            file=layout.path,
            line=line,
            column=column,
        ) from None


def median_interval(times: pd.DatetimeIndex) -> pd.Timedelta | None:
    """Median of the positive intervals between stamps, or None for fewer than 2 stamps."""
    d = np.diff(times.asi8)
    d = d[d > 0]
    return pd.Timedelta(int(np.median(d)), "ns") if d.size else None


def bin_index(times: pd.DatetimeIndex, origin: pd.Timestamp, step: pd.Timedelta) -> np.ndarray:
    """Index k of the interval (origin + (k-1) step, origin + k step] holding each stamp."""
    d = times.asi8 - origin.as_unit("ns").value
    return -((-d) // step.value)


def align(values: np.ndarray, valid: np.ndarray, k: np.ndarray, k0: int, n_bins: int):
    """Mean of the valid samples in each interval.

    Parameters
    ----------
    values : ndarray (n, m)
        SI values of one file, rows in time order.
    valid : ndarray (n, m) of bool
        False where the sample is masked.
    k : ndarray (n,) of int
        Interval index of each row (non-decreasing).
    k0, n_bins : int
        Index of the first interval of the common base and the number of intervals.

    Returns
    -------
    mean : ndarray (n_bins, m)
        NaN where an interval holds no valid sample.
    count : ndarray (n_bins, m) of int
        Number of valid samples averaged.
    """
    m = values.shape[1]
    mean = np.full((n_bins, m), np.nan)
    count = np.zeros((n_bins, m), dtype=np.int64)
    if values.shape[0] == 0:
        return mean, count
    starts = np.flatnonzero(np.r_[True, k[1:] != k[:-1]])
    rows = k[starts] - k0
    clean = np.where(valid, values, 0.0)
    sums = np.add.reduceat(clean, starts, axis=0)
    counts = np.add.reduceat(valid.astype(np.int64), starts, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean[rows] = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    count[rows] = counts
    return mean, count
