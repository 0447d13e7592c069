"""Per-file work of ``read_run``: each tag's cells to SI values, with their exclusions.

A :class:`_Collector` takes the pieces pyarrow reads of one file and fills the
run's float64 array column by column; :func:`_convert` and :func:`_to_si` apply a
tag's calibration polynomial and unit (gauge pressures against the barometer tag,
:func:`_barometer`, or the fixed atmosphere, :func:`_atmosphere`); every masked cell
is recorded with its reason in :class:`_Exclusions`.  :mod:`perftest.importers.reader`
drives the steps (docs/run-files.md states the rules for users).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa

from perftest.errors import DataError, UnitError
from perftest.importers.cells import (
    TextPiece,
    classify_numbers,
    classify_text,
    quality_flags,
    sentinel_sets,
)
from perftest.importers.columns import (
    _FileData,
    _TagJob,
)
from perftest.importers.csvfile import lines_of_rows

# --- per-file processing -------------------------------------------------------------------


class _Exclusions:
    """Collects excluded samples as arrays; one DataFrame at the end."""

    def __init__(self):
        self.parts: list[tuple] = []

    def add(self, times, tag: str, reason, raw_value, source: str) -> None:
        n = len(times)
        if n:
            reason = np.broadcast_to(np.asarray(reason, dtype=object), (n,))
            raw_value = np.broadcast_to(np.asarray(raw_value, dtype=object), (n,))
            self.parts.append((np.asarray(times), tag, reason, raw_value, source))

    def frame(self) -> pd.DataFrame:
        cols = ["time", "tag", "reason", "raw_value", "source"]
        if not self.parts:
            return pd.DataFrame(
                {
                    "time": pd.DatetimeIndex([], tz="UTC", name="time"),
                    "tag": pd.Series([], dtype=object),
                    "reason": pd.Series([], dtype=object),
                    "raw_value": pd.Series([], dtype=object),
                    "source": pd.Series([], dtype=object),
                },
                columns=cols,
            )
        sizes = [len(p[0]) for p in self.parts]
        times = pd.DatetimeIndex(np.concatenate([p[0] for p in self.parts])).tz_localize("UTC")
        out = pd.DataFrame(
            {
                "time": times,
                "tag": np.repeat(np.array([p[1] for p in self.parts], dtype=object), sizes),
                "reason": np.concatenate([p[2] for p in self.parts]),
                "raw_value": np.concatenate([p[3] for p in self.parts]),
                "source": np.repeat(np.array([p[4] for p in self.parts], dtype=object), sizes),
            },
            columns=cols,
        )
        return out.sort_values(["time", "tag"], kind="stable").reset_index(drop=True)


# Rows allocated beyond the estimate from the first lines' length (byte count of the
# data / mean line length): lines of a log grow little (a digit more here and there).
# Too few rows cost a reallocation (the array twice, briefly), too many cost memory.
# A judgement, no source.
_ROW_MARGIN = 1.02

# pyarrow >= 16 turns a record batch of number columns into one column-major array
_TENSORS = hasattr(pa.RecordBatch, "to_tensor")


class _Collector:
    """Sink of :func:`scan_table` for one file: the tag columns' numbers go straight
    into one float64 array (a column per tag, rows in file order); blank cells, text
    pieces, bad quality flags and time texts are kept aside."""

    def __init__(self, fd: _FileData, sentinels: tuple):
        self.fd = fd
        lay = fd.layout
        body = max(lay.path.stat().st_size - lay.data_offset, 0)
        est = int(body / max(lay.row_bytes, 1.0) * _ROW_MARGIN) + 16
        self.values = np.empty((est, len(fd.jobs)), order="F")
        self.blank: list[list[np.ndarray]] = [[] for _ in fd.jobs]
        self.pieces: list[list[TextPiece]] = [[] for _ in fd.jobs]
        self.grouped: dict[int, int] = {}  # job -> cells read with thousands separators
        self.flags: dict[str, list] = {
            fd.quality[j.header]: [] for j in fd.jobs if j.header in fd.quality
        }
        self.times: list[list[pa.Array]] = [[] for _ in fd.time_cols]
        self.sets = [
            sentinel_sets(tuple(sentinels) + tuple(j.spec.sentinels if j.spec else ()))
            for j in fd.jobs
        ]

    def __call__(self, table: pa.Table, r0: int) -> None:
        k = table.num_rows
        if r0 + k > self.values.shape[0]:
            rows = max(r0 + k, int(1.25 * self.values.shape[0]))
            grown = np.empty((rows, len(self.fd.jobs)), order="F")
            grown[:r0] = self.values[:r0]
            self.values = grown
        for parts, name in zip(self.times, self.fd.time_cols, strict=True):
            parts.extend(table.column(name).chunks)
        for name, parts in self.flags.items():
            rows, flags = quality_flags(table.column(name))
            if rows.size:
                parts.append((r0 + rows, flags))
        values = self.values
        decimal = self.fd.layout.decimal
        numeric = []
        for j, job in enumerate(self.fd.jobs):
            col = table.column(job.header)
            if pa.types.is_floating(col.type):
                numeric.append(j)
                if col.null_count:  # blank cells: NaN in the values, rows noted
                    self.blank[j].append(r0 + np.flatnonzero(col.is_null().to_numpy()))
            else:
                c = classify_text(col, decimal, *self.sets[j])
                self.grouped[j] = self.grouped.get(j, 0) + c.grouped
                values[r0 : r0 + k, j] = c.values
                self.pieces[j].append(TextPiece.of(r0, c))
        if not numeric:
            return
        sub = table.select([self.fd.jobs[j].header for j in numeric])
        cols = slice(None) if len(numeric) == values.shape[1] else numeric
        if _TENSORS:  # all number columns of a block in one call
            r = r0
            for batch in sub.to_batches():
                block = np.asarray(batch.to_tensor(null_to_nan=True, row_major=False))
                values[r : r + batch.num_rows, cols] = block
                r += batch.num_rows
        else:  # pyarrow < 16: column by column
            for j, col in zip(numeric, sub.columns, strict=True):
                values[r0 : r0 + k, j] = col.to_numpy()

    def time_texts(self) -> pd.Series:
        cols = [pa.chunked_array(parts, pa.string()).to_pandas() for parts in self.times]
        if len(cols) == 1:
            return cols[0]
        return cols[0] + " " + cols[1]

    def quality(self, header: str) -> tuple[np.ndarray, np.ndarray]:
        parts = self.flags.get(self.fd.quality.get(header), [])
        if not parts:
            return np.empty(0, np.int64), np.empty(0, object)
        return np.concatenate([p[0] for p in parts]), np.concatenate([p[1] for p in parts])


def _naive_utc(times: pd.DatetimeIndex) -> np.ndarray:
    """datetime64[ns] (UTC wall clock) for the exclusion table."""
    return times.tz_convert("UTC").tz_localize(None).to_numpy()


def _atmosphere(plant, baro, fd: _FileData, job: _TagJob, kept_times: pd.DatetimeIndex):
    """Atmospheric pressure [Pa] for a gauge column: barometer tag or fixed value."""
    layout = fd.layout
    if job.tag == (plant.site.barometer_tag if plant is not None else None):
        raise DataError(
            f"{layout.where(column=job.header)}: the barometer tag {job.tag!r} is logged in a "
            f"gauge unit {job.unit!r}. A barometer reads absolute pressure; correct its unit.",
            file=layout.path,
            column=job.header,
            tag=job.tag,
        )
    if baro is not None:
        t, p = baro
        return np.interp(kept_times.asi8.astype(float), t, p)
    if plant is not None and plant.site.atmospheric_pressure is not None:
        return float(plant.site.atmospheric_pressure)
    raise DataError(
        f"{layout.where(column=job.header)}: tag {job.tag!r} is logged in the gauge unit "
        f"{job.unit!r}, and no atmospheric reference is known. Set site.atmospheric_pressure "
        "or site.barometer_tag in the plant file (or log the column in an absolute unit).",
        file=layout.path,
        column=job.header,
        tag=job.tag,
    )


def _convert(fd, j, job, plant, baro, excl: _Exclusions, stats: dict, line_of) -> np.ndarray:
    """Classify, mask, calibrate and convert column ``j`` of a file in place.

    On return ``fd.values[:n_kept, j]`` holds the SI values of the kept rows (NaN where
    masked) and ``fd.mask[:, j]`` the mask; returns that mask.
    """
    layout = fd.layout
    ti = fd.times
    col = fd.collector
    stem = layout.stem
    column = fd.values[:, j]  # every row as read
    blank = np.concatenate(col.blank[j]) if col.blank[j] else np.empty(0, np.int64)
    c = classify_numbers(column, blank, col.sets[j][1], col.pieces[j])
    col.blank[j] = col.pieces[j] = None
    pos = np.flatnonzero(c.bad)

    if c.text_rows.size and c.n_numbers == 0:
        row = int(c.text_rows[0])
        line = int(line_of([row])[0])
        cell = c.text[np.searchsorted(pos, row)]
        raise DataError(
            f"{layout.where(column=job.header)}: the column holds text and no numbers (e.g. "
            f"{cell!r} on line {line}). If it is not a measurement, leave it out (a plant "
            "file reads only its tags); if it holds numbers with decimal commas, pass "
            "decimal=','.",
            file=layout.path,
            column=job.header,
            line=line,
            tag=job.tag,
        )
    keep = ti.keep
    has_dups = ti.duplicate_rows.size > 0
    bad_all = c.bad
    reasons = {}  # kind -> (rows, reason per row, raw cell per row)
    if c.reason is not None:
        reason = c.reason.copy()
        if c.text_rows.size:
            lines = line_of(c.text_rows)
            for w, ln in zip(np.searchsorted(pos, c.text_rows), lines, strict=True):
                reason[w] = f"text {str(c.text[w]).strip()!r} in a numeric cell (line {ln})"
            stats["text"][job.tag] = int(c.text_rows.size)
        reasons["cell"] = (pos, reason, c.text)
    qrows, qflags = col.quality(job.header)
    if qrows.size:
        fresh = ~bad_all[qrows]
        qpos, qraw = qrows[fresh], qflags[fresh]
        if qpos.size:
            qcol = fd.quality[job.header]
            qreason = np.array(
                [f"quality flag {str(q).strip()!r} in column {qcol!r}" for q in qraw], dtype=object
            )
            reasons["quality"] = (qpos, qreason, column[qpos].astype(object))
            bad_all = bad_all.copy()
            bad_all[qpos] = True
    # exclusions of masked samples on kept rows
    for rows, reason, raw in reasons.values():
        sel = keep[rows] if has_dups else slice(None)
        excl.add(_naive_utc(ti.times[rows[sel]]), job.tag, reason[sel], raw[sel], stem)
    if has_dups:
        d = ti.duplicate_rows
        raw_d = column[d].astype(object)
        if pos.size:  # a masked cell's raw value is its text
            w = np.minimum(np.searchsorted(pos, d), pos.size - 1)
            hit = pos[w] == d
            raw_d[hit] = c.text[w[hit]]
        excl.add(
            _naive_utc(ti.times[d]),
            job.tag,
            "duplicate time stamp, first row kept",
            raw_d,
            stem,
        )
        values = column[keep]
        bad = bad_all[keep]
    else:
        values = column
        bad = bad_all
    stats["masked"][job.tag] = int(bad.sum())
    stats["samples"][job.tag] = int(keep.sum())

    readings = values
    if job.spec is not None and job.spec.calibration is not None:
        values = job.spec.apply_calibration(values)
    if job.unit is None:
        si = np.asarray(values, dtype=float)
    else:
        si = _to_si(fd, job, plant, baro, values, readings, bad, line_of)
    out = fd.values[: bad.size, j]
    out[:] = si
    out[bad] = np.nan
    fd.mask[:, j] = bad
    return bad


def _to_si(fd, job, plant, baro, values, readings, bad, line_of) -> np.ndarray:
    """SI values of one column's kept rows; impossible absolute values stop the import."""
    from perftest.units import nonpositive_pressure, parse_unit, to_si

    layout = fd.layout
    ti = fd.times
    keep = ti.keep
    has_dups = ti.duplicate_rows.size > 0
    spec = parse_unit(job.unit)
    atm = None
    if spec.gauge and job.quantity != "temperature_difference":
        atm = _atmosphere(plant, baro, fd, job, ti.times[keep] if has_dups else ti.times)
    density = None
    if spec.needs_density and not (spec.density_exponent == 1 and job.quantity == "volume_flow"):
        density = job.spec.density if job.spec is not None else None
    try:
        si = to_si(values, spec, quantity=job.quantity, atmospheric_pressure=atm, density=density)
    except UnitError as exc:
        raise UnitError(
            f"{layout.where(column=job.header)} (tag {job.tag!r}, unit {job.unit!r} from "
            f"{job.unit_origin}): {exc}",
            file=layout.path,
            column=job.header,
            tag=job.tag,
        ) from None
    si = np.asarray(si, dtype=float)
    if job.quantity == "pressure":
        impossible = nonpositive_pressure(si) & ~bad
        what = "an absolute pressure at or below 0 Pa"
    elif job.quantity == "temperature":
        with np.errstate(invalid="ignore"):
            impossible = (si < 0.0) & ~bad
        what = "a temperature below 0 K"
    else:
        impossible = None
    if impossible is not None and impossible.any():
        kept_row = int(np.argmax(impossible))
        row = int(np.flatnonzero(keep)[kept_row]) if has_dups else kept_row
        line = int(line_of([row])[0])
        raw_v = float(readings[kept_row])
        hint = (
            " Check the atmospheric reference and whether the unit is gauge or absolute."
            if spec.gauge
            else " Check the unit (gauge or absolute?)."
        )
        raise DataError(
            f"{layout.where(line, job.header)}: the reading {raw_v!r} {job.unit} gives {what} "
            f"({si[kept_row]:.6g} SI).{hint} Or mark the sample bad (a sentinel).",
            file=layout.path,
            line=line,
            column=job.header,
            tag=job.tag,
        )
    return si


def _barometer(files, plant, excl, stats, log) -> tuple | None:
    """SI barometer samples (UTC ns as float, Pa) for gauge conversion, or None.

    The barometer column is converted here, before the others (marked in ``fd.done``).
    """
    if plant is None or plant.site.barometer_tag is None:
        return None
    tag = plant.site.barometer_tag
    for fd in files:
        for j, job in enumerate(fd.jobs):
            if job.tag == tag:
                line_of = _line_fn(fd.layout)
                bad = _convert(fd, j, job, plant, None, excl, stats, line_of)
                fd.done.add(j)
                si = fd.values[: bad.size, j]
                times = fd.times.times[fd.times.keep]
                ok = ~bad
                if not ok.any():
                    raise DataError(
                        f"{fd.layout.where(column=job.header)}: the barometer tag {tag!r} has "
                        "no valid sample, so gauge pressures cannot be made absolute. Fix the "
                        "column or set site.atmospheric_pressure instead.",
                        file=fd.layout.path,
                        column=job.header,
                        tag=tag,
                    )
                if bad.any():
                    log.append(
                        f"barometer {tag!r}: {int(bad.sum())} masked sample(s) bridged by linear "
                        "interpolation in time for gauge conversion"
                    )
                return times.asi8[ok].astype(float), si[ok]
    return None  # pragma: no cover - _plan guarantees the tag was found


def _line_fn(layout):
    return lambda rows: lines_of_rows(layout, rows)


def _fmt(td: pd.Timedelta) -> str:
    s = td.total_seconds()
    if s >= 60 and s % 60 == 0:
        return f"{s / 60:g} min"
    return f"{s:g} s"
