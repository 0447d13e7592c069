"""The cells of a run CSV that pyarrow did not read as numbers, and quality columns.

A column that pyarrow refuses as float64 is read as text from that piece on and
classified here once per distinct text, not per cell (:func:`classify_text`): a
number (with a decimal comma or thousands separators), a sentinel text or value
meaning "no valid sample" (:data:`TEXT_SENTINELS`, :data:`NUMERIC_SENTINELS`), or
text.  A number column's sentinel values are masked by :func:`classify_numbers`, and
a quality/status column marks its tag's samples bad unless it reads good
(:data:`GOOD_QUALITY`, :func:`quality_flags`).  :mod:`perftest.importers.csvfile`
reads the file; docs/run-files.md states the rules for users.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pyarrow as pa

__all__ = [
    "TextPiece",
    "Classified",
    "sentinel_sets",
    "classify_numbers",
    "classify_text",
    "quality_flags",
    "TEXT_SENTINELS",
    "NAN_TEXTS",
    "NUMERIC_SENTINELS",
    "GOOD_QUALITY",
]

#: Cell texts that mean "no valid sample" (compared case-insensitively, trimmed).
#: Common practice of historian and logger exports, no source.
TEXT_SENTINELS: frozenset[str] = frozenset(
    {
        "bad",
        "bad input",
        "bad data",
        "i/o timeout",
        "io timeout",
        "timeout",
        "comm fail",
        "comm failure",
        "calc failed",
        "calc error",
        "no data",
        "nodata",
        "not connected",
        "scan off",
        "shutdown",
        "pt created",
        "over range",
        "under range",
        "out of service",
        "error",
        "err",
        "invalid",
        "n/a",
        "#n/a",
        "na",
        "#na",
        "null",
        "none",
        "#value!",
        "#ref!",
        "#div/0!",
        "#num!",
        "---",
        "----",
    }
)

#: Spellings of "not a number" that pandas/pyarrow read as NaN.
NAN_TEXTS: frozenset[str] = frozenset({"nan", "-nan", "+nan"})

#: Numeric cell values that loggers write for a missing sample.  Common practice, no
#: source; -9999 and 9999999 are the usual "no value" fillers of data loggers.
NUMERIC_SENTINELS: tuple[float, ...] = (-9999.0, -99999.0, 9999999.0, -9999999.0)

#: Quality/status cell values that mean "good".  "Good"/"OK" are the words of
#: historian exports; 192 (0xC0) is the OPC DA "good" quality code; 0 is the
#: "no fault" status of most PLC status words.  Anything else, blank included,
#: marks the sample bad.  Common practice, no source.
GOOD_QUALITY: frozenset[str] = frozenset({"good", "ok", "g", "192", "0"})


@dataclass
class Classified:
    """Numbers of one column plus which cells are bad and why."""

    values: np.ndarray  # float64, NaN where the cell is not a number
    bad: np.ndarray  # bool: masked cell
    reason: np.ndarray | None  # object array of reasons at the bad positions (same order)
    text: np.ndarray | None  # object array: raw cell text at the bad positions
    text_rows: np.ndarray  # rows whose cell is text that is no known sentinel
    n_numbers: int
    grouped: int = 0  # cells read as numbers with thousands separators ("1,000.4")


def sentinel_sets(extra) -> tuple[frozenset[str], np.ndarray]:
    """Texts (case-folded) and numbers that mean "bad sample", with ``extra`` added."""
    texts = set(TEXT_SENTINELS)
    numbers = list(NUMERIC_SENTINELS)
    for s in extra:
        if isinstance(s, str):
            texts.add(s.strip().casefold())
        else:
            numbers.append(float(s))
    return frozenset(texts), np.asarray(numbers, dtype=float)


@dataclass
class TextPiece:
    """The bad cells of one piece of a column read as text (rows relative to the piece)."""

    first_row: int
    rows: int
    bad_rows: np.ndarray  # rows of the bad cells
    reason: np.ndarray  # object: reason per bad cell
    text: np.ndarray  # object: raw value per bad cell
    text_rows: np.ndarray  # rows whose cell is text that is no known sentinel

    @classmethod
    def of(cls, first_row: int, c: Classified) -> TextPiece:
        if c.reason is None:
            e = np.empty(0, np.int64)
            return cls(first_row, c.values.size, e, np.empty(0, object), np.empty(0, object), e)
        return cls(first_row, c.values.size, np.flatnonzero(c.bad), c.reason, c.text, c.text_rows)


def classify_numbers(
    values: np.ndarray, blank_rows: np.ndarray, numbers, pieces: list[TextPiece] = ()
) -> Classified:
    """Classify a float column assembled from pieces; bad cells become NaN in place.

    Parameters
    ----------
    values : ndarray of float64
        The column as parsed (NaN for blank cells and where a text piece found no
        number).  Written in place.
    blank_rows : ndarray of int
        Rows of the blank cells of pieces read as numbers.
    numbers : ndarray
        Numeric sentinels.
    pieces : list of TextPiece
        Pieces read as text; their rows keep the reasons found by :func:`classify_text`.
    """
    n = values.size
    with np.errstate(invalid="ignore"):
        bad = np.isnan(values) | np.isinf(values) | np.isin(values, numbers)
    t_pos, t_reason, t_text, t_rows = [], [], [], []
    for p in pieces:
        bad[p.first_row : p.first_row + p.rows] = False
        if p.bad_rows.size:
            t_pos.append(p.first_row + p.bad_rows)
            t_reason.append(p.reason)
            t_text.append(p.text)
            t_rows.append(p.first_row + p.text_rows)
    text_rows = np.concatenate(t_rows) if t_rows else np.empty(0, np.int64)
    pos = np.flatnonzero(bad)
    if pos.size == 0 and not t_pos:
        return Classified(values, bad, None, None, text_rows, n)
    v = values[pos]
    is_blank = np.zeros(pos.size, bool)
    if blank_rows.size:
        is_blank[np.searchsorted(pos, blank_rows)] = True
    reason, text = _numeric_reasons(v, is_blank)
    values[pos] = np.nan
    if t_pos:
        pos = np.concatenate([pos, *t_pos])
        reason = np.concatenate([reason, *t_reason])
        text = np.concatenate([text, *t_text])
        order = np.argsort(pos, kind="stable")
        pos, reason, text = pos[order], reason[order], text[order]
        bad[pos] = True
    return Classified(values, bad, reason, text, text_rows, n - pos.size)


def _numeric_reasons(v: np.ndarray, blank: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Reason and raw value of bad numeric cells (NaN, blank, infinite, sentinel)."""
    reason = np.empty(v.size, dtype=object)
    text = np.empty(v.size, dtype=object)
    reason[:] = "sentinel value"
    text[:] = v
    reason[np.isinf(v)] = "infinite value"
    nanv = np.isnan(v)
    reason[nanv & ~blank] = "NaN in the file"
    text[nanv & ~blank] = "NaN"
    reason[blank] = "blank cell"
    text[blank] = ""
    for p in np.flatnonzero(~nanv & ~np.isinf(v)):
        reason[p] = f"sentinel value {v[p]:.15g}"
    return reason, text


def classify_text(col, decimal: str, texts, numbers) -> Classified:
    """Classify a text column cell by cell (each distinct text once).

    Cells that are numbers give their value; bad cells are NaN, with their reason
    and their raw value (the cell text, or the number for numeric sentinels).
    """
    raw = col.to_numpy(zero_copy_only=False).astype(object)
    s = pd.Series(raw, dtype=object).str.strip()
    num_text = s.str.replace(",", ".", regex=False) if decimal == "," else s
    values = pd.to_numeric(num_text, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    values, grouped = _thousands(s, values, decimal)
    with np.errstate(invalid="ignore"):
        notnum = np.isnan(values)
        inf = np.isinf(values)
        sent = np.isin(values, numbers)
    bad = notnum | inf | sent
    text_rows = np.empty(0, np.int64)
    if not bad.any():
        return Classified(values, bad, None, None, text_rows, values.size, grouped)
    pos = np.flatnonzero(bad)
    cells = s.to_numpy(dtype=object)[pos]
    reason = np.empty(pos.size, dtype=object)
    out_text = raw[pos]
    # classify each distinct text once
    lookup: dict[str, str] = {}
    is_text = np.zeros(pos.size, bool)
    for i, cell in enumerate(cells):
        v = values[pos[i]]
        if not np.isnan(v):
            reason[i] = "infinite value" if np.isinf(v) else f"sentinel value {v:.15g}"
            out_text[i] = float(v)  # as a float-typed piece gives it
            continue
        r = lookup.get(cell)
        if r is None:
            key = cell.casefold()
            if cell == "":
                r = "blank cell"
            elif key in NAN_TEXTS:
                r = "NaN in the file"
            elif key in texts:
                r = f"sentinel text {cell!r}"
            else:
                r = ""
            lookup[cell] = r
        if r == "":
            is_text[i] = True
        reason[i] = r
    text_rows = pos[is_text]
    values = values if values.flags.writeable else values.copy()
    values[pos] = np.nan
    return Classified(values, bad, reason, out_text, text_rows, values.size - pos.size, grouped)


def _thousands(s: pd.Series, values: np.ndarray, decimal: str) -> tuple[np.ndarray, int]:
    """Read cells with thousands separators where the convention is clear.

    With a decimal point, commas group thousands ("1,000.4"); with a decimal comma,
    points do ("1.000,4").  A cell with groups *and* a decimal part is unambiguous.
    A cell with groups only ("1,000") could also be a decimal mark, so it is read
    only when unambiguous cells in the same piece show the convention.  Returns the
    values with those cells filled, and how many they are.
    """
    miss = np.isnan(values)
    if not miss.any():
        return values, 0
    g, d = ("," if decimal == "." else "."), decimal
    cells = s[miss]
    body = rf"[+-]?\d{{1,3}}(?:{re.escape(g)}\d{{3}})+"
    sure = cells.str.fullmatch(rf"{body}{re.escape(d)}\d+", na=False)
    if not sure.any():
        return values, 0
    take = sure | cells.str.fullmatch(body, na=False)
    text = cells[take].str.replace(g, "", regex=False).str.replace(d, ".", regex=False)
    values = values.copy()
    values[np.flatnonzero(miss)[take.to_numpy()]] = pd.to_numeric(text).to_numpy(float)
    return values, int(take.sum())


def _good_flags(raw: np.ndarray) -> np.ndarray:
    s = pd.Series(raw, dtype=object).str.strip().str.casefold()
    good = np.array(s.isin(GOOD_QUALITY), dtype=bool)
    if not good.all():
        # "192.0" or "0.0" written by a spreadsheet: compare as numbers too
        num = pd.to_numeric(s, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        good |= np.isin(num, (0.0, 192.0))
    return good


def quality_flags(col: pa.ChunkedArray) -> tuple[np.ndarray, np.ndarray]:
    """Rows whose quality cell is not good, and those cells' text.

    Dictionary-encoded pieces are judged once per distinct flag.
    """
    rows, flags = [], []
    r0 = 0
    for ch in col.chunks:
        if pa.types.is_dictionary(ch.type) and ch.null_count == 0:
            words = ch.dictionary.to_numpy(zero_copy_only=False).astype(object)
            good = _good_flags(words)
            idx = ch.indices.to_numpy(zero_copy_only=False)
            bad = np.flatnonzero(~good[idx])
            flags.append(words[idx[bad]])
        else:
            cells = ch.cast(pa.string()) if pa.types.is_dictionary(ch.type) else ch
            raw = cells.to_numpy(zero_copy_only=False).astype(object)
            bad = np.flatnonzero(~_good_flags(raw))
            flags.append(raw[bad])
        rows.append(r0 + bad)
        r0 += len(ch)
    if not rows:
        return np.empty(0, np.int64), np.empty(0, object)
    return np.concatenate(rows), np.concatenate(flags)
