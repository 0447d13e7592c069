"""Arguments of ``read_run`` and which column of which file feeds which tag."""

from __future__ import annotations

import os
import re
import zoneinfo
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path

import numpy as np
import pandas as pd

from perftest.errors import DataError, InputError, UnitError
from perftest.importers.csvfile import FileLayout, quality_base

#: Header names taken as the time column (compared case-insensitively).
TIME_NAMES = (
    "timestamp",
    "time stamp",
    "datetime",
    "date_time",
    "date/time",
    "date time",
    "time",
    "ts",
    "date",
)

_MAX_LISTED = 12
_CLOCK = re.compile(r"^\d{1,2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?(?:\s*[AaPp][Mm])?$")


@dataclass
class _TagJob:
    tag: str
    header: str
    unit: str | None
    unit_origin: str
    quantity: str
    spec: object | None  # TagSpec or None


@dataclass
class _FileData:
    layout: FileLayout
    time_cols: list[str]
    quality: dict[str, str]  # base column -> quality column
    jobs: list[_TagJob] = field(default_factory=list)
    ignored: list[str] = field(default_factory=list)
    text_cols: list[str] = field(default_factory=list)
    times: object = None  # TimeInfo
    collector: object = None  # reader._Collector while the file is converted
    values: np.ndarray | None = None  # (rows, tags), column-major: numbers, then SI
    mask: np.ndarray | None = None  # (kept rows, tags), column-major
    done: set[int] = field(default_factory=set)  # tag columns already converted


# --- argument checks -----------------------------------------------------------------------


def _as_paths(paths) -> list:
    """Paths, or staged sources (:class:`~perftest.importers.sources.StagedSource`)."""
    from perftest.importers.sources import StagedSource

    if isinstance(paths, str | os.PathLike | StagedSource):
        paths = [paths]
    if isinstance(paths, pd.DataFrame | pd.Series) or hasattr(paths, "read"):
        what = "an open file" if hasattr(paths, "read") else f"a {type(paths).__name__}"
        hint = (
            f" (this one's path is {paths.name!r}: pass that)"
            if isinstance(getattr(paths, "name", None), str)
            else ""
        )
        raise InputError(
            "The 'paths' parameter of read_run must be a file path or a list of paths; it "
            f"reads the files itself (units rows, time zones, raw text). Got {what}{hint}. "
            "For a table already in memory in SI units, use perftest.Run.from_frame(df, plant).",
            parameter="paths",
        )
    try:
        out = [p if isinstance(p, StagedSource) else Path(p) for p in paths]
    except TypeError:
        raise InputError(
            "The 'paths' parameter of read_run must be a file path or a list of paths. "
            f"Got {type(paths).__name__}.",
            parameter="paths",
        ) from None
    if not out:
        raise InputError(
            "The 'paths' parameter of read_run must name at least one CSV file. Got an empty list.",
            parameter="paths",
        )
    return out


def _as_step(every) -> pd.Timedelta | None:
    if every is None:
        return None
    try:
        if isinstance(every, int | float | np.number) and not isinstance(every, bool):
            step = pd.Timedelta(seconds=float(every))
        elif isinstance(every, str | timedelta | pd.Timedelta):
            step = pd.Timedelta(every)
        else:
            raise TypeError
    except (TypeError, ValueError):
        step = None
    if step is None or pd.isna(step) or step <= pd.Timedelta(0):
        raise InputError(
            "The 'every' parameter of read_run must be a positive interval such as '1min', "
            f"'10s' or a number of seconds. Got {every!r}.",
            parameter="every",
        )
    return step.as_unit("ns")


def _check_zone(timezone, where: str) -> str:
    if not isinstance(timezone, str):
        raise InputError(
            f"The 'timezone' parameter of read_run must be an IANA zone name such as "
            f"'UTC' or 'Europe/Berlin'. Got {timezone!r}.",
            parameter="timezone",
        )
    try:
        zoneinfo.ZoneInfo(timezone)
    except (zoneinfo.ZoneInfoNotFoundError, ValueError):
        raise InputError(
            f"{where} must be an IANA zone name such as 'UTC' or 'Europe/Berlin'. "
            f"Got {timezone!r}.",
            parameter="timezone",
        ) from None
    return timezone


def _as_sentinels(sentinels) -> tuple:
    if sentinels is None:
        return ()
    if isinstance(sentinels, str | int | float):
        sentinels = [sentinels]
    try:
        sentinels = list(sentinels)
    except TypeError:
        raise InputError(
            "The 'sentinels' parameter of read_run must be a number, a text or a list of "
            f"them. Got {type(sentinels).__name__}.",
            parameter="sentinels",
        ) from None
    out = []
    for s in sentinels:
        if isinstance(s, bool) or not isinstance(s, str | int | float | np.number):
            raise InputError(
                f"The 'sentinels' parameter of read_run must hold numbers or texts. Got {s!r}.",
                parameter="sentinels",
            )
        out.append(s if isinstance(s, str) else float(s))
    return tuple(out)


def _as_units(units) -> dict[str, str]:
    if units is None:
        return {}
    if not isinstance(units, Mapping):
        raise InputError(
            "The 'units' parameter of read_run must map column or tag names to units, "
            f"e.g. {{'TT-101': 'degC'}}. Got {type(units).__name__}.",
            parameter="units",
        )
    for k, v in units.items():
        if not isinstance(v, str):
            raise InputError(
                f"The 'units' parameter of read_run must map names to unit texts. "
                f"Got {v!r} for {k!r}.",
                parameter="units",
            )
    return dict(units)


# --- columns -------------------------------------------------------------------------------


def _is_time_like(cells: list[str]) -> bool:
    cells = [c.strip() for c in cells]
    if not cells or any(not c for c in cells):
        return False
    for c in cells:
        try:
            float(c.replace(",", "."))
            return False  # numbers are values, not stamps
        except ValueError:
            pass
    # utc=True: stamps with and without offsets (refused later, naming the line)
    # must not stop the detection with pandas' "mixed time zones" ValueError
    parsed = pd.to_datetime(pd.Series(cells), errors="coerce", format="mixed", utc=True)
    return bool(parsed.notna().all())


def _time_columns(layout: FileLayout, time_column) -> list[str]:
    header = layout.header
    if time_column is not None:
        if isinstance(time_column, str):
            names = [time_column]
        else:
            try:
                names = list(time_column)
            except TypeError:
                names = []  # not a name nor a pair: refused just below
        if not 1 <= len(names) <= 2 or not all(isinstance(n, str) for n in names):
            raise InputError(
                "The 'time_column' parameter of read_run must be a column name or a pair "
                f"(date column, time column). Got {time_column!r}.",
                parameter="time_column",
            )
        for n in names:
            if n not in header:
                raise DataError(
                    f"{layout.name}, line {layout.header_line}: no column {n!r} (named by "
                    f"time_column). The header holds: {_listing(header)}.",
                    file=layout.path,
                    line=layout.header_line,
                    column=n,
                )
        return names
    folded = {h.casefold(): h for h in header}
    col_of = {h: i for i, h in enumerate(header)}

    def cells(name):
        i = col_of[name]
        return [r[i] for r in layout.sample_rows if i < len(r)]

    if "date" in folded and "time" in folded:
        # "10:00:00" alone is a clock time: join it to the date column
        if all(_CLOCK.match(c.strip()) for c in cells(folded["time"])):
            return [folded["date"], folded["time"]]
    for cand in TIME_NAMES:
        if cand in folded:
            return [folded[cand]]
    for h in header:
        if h and _is_time_like(cells(h)):
            return [h]
    raise DataError(
        f"{layout.name}: no time column found (looked for a column named time, timestamp, "
        f"date ... or holding date-times). The header holds: {_listing(header)}. Name it "
        "with time_column=.",
        file=layout.path,
    )


def _listing(names) -> str:
    names = [repr(n) for n in names]
    if len(names) > _MAX_LISTED:
        return ", ".join(names[:_MAX_LISTED]) + f" ... ({len(names)} in all)"
    return ", ".join(names)


def _prepare(layout: FileLayout, time_cols: list[str], plant_columns: set[str]) -> _FileData:
    header = [h for h in layout.header if h]
    hset = set(header)
    quality: dict[str, str] = {}
    for h in header:
        if h in time_cols or h in plant_columns:
            continue
        base = quality_base(h, hset)
        if base is not None and base not in time_cols:
            quality[base] = h
    return _FileData(layout, time_cols, quality)


def _data_columns(fd: _FileData) -> list[str]:
    qcols = set(fd.quality.values())
    return [h for h in fd.layout.header if h and h not in fd.time_cols and h not in qcols]


def _same_unit(a: str, b: str) -> bool:
    from perftest.units import parse_unit

    if a.strip() == b.strip():
        return True
    sa, sb = parse_unit(a), parse_unit(b)
    return (
        sa.quantity == sb.quantity
        and sa.gauge_sign == sb.gauge_sign
        and sa.density_exponent == sb.density_exponent
        and np.isclose(sa.scale, sb.scale, rtol=1e-12, atol=0)
        and np.isclose(sa.offset, sb.offset, rtol=1e-12, atol=1e-12)
    )


def _resolve_unit(fd: _FileData, header: str, tag: str, spec, units: dict) -> tuple:
    """Unit of one column and where it came from; conflicts raise."""
    from perftest.units import parse_unit

    layout = fd.layout
    given = []
    if layout.units_row is not None:
        cell = layout.units_row[layout.header.index(header)]
        if cell:
            try:
                parse_unit(cell)
            except UnitError as exc:
                line = layout.header_line + 1
                raise UnitError(
                    f"{layout.where(line, header)}: unknown unit {cell!r} in the units row. {exc}",
                    file=layout.path,
                    line=line,
                    column=header,
                ) from None
            given.append((cell, f"the units row of {layout.name}"))
    for key in (tag, header):
        if key in units:
            try:
                parse_unit(units[key])
            except UnitError as exc:
                raise UnitError(
                    f"The 'units' parameter of read_run gives {units[key]!r} for {key!r}: {exc}",
                    parameter="units",
                    column=header,
                ) from None
            given.append((units[key], "the units argument"))
            break
    if spec is not None and spec.unit is not None:
        given.append((spec.unit, f"the plant file ([tags.{tag}] unit)"))
    for u, origin in given[1:]:
        if not _same_unit(given[0][0], u):
            raise DataError(
                f"{layout.where(column=header)}: {given[0][1]} says {given[0][0]!r} but "
                f"{origin} says {u!r} for tag {tag!r}. Make them agree: correct the plant "
                "file, the units argument or the file's units row.",
                file=layout.path,
                column=header,
                tag=tag,
            )
    if not given:
        return None, "none"
    return given[0]


def _plan(files: list[_FileData], plant, units: dict, log: list[str]) -> None:
    from perftest.units import parse_unit

    if plant is not None:
        for tid, spec in plant.tags.items():
            hits = [fd for fd in files if spec.column in _data_columns(fd)]
            if spec.source is not None:
                named = [fd for fd in files if fd.layout.stem == spec.source]
                if not named:
                    raise DataError(
                        f"Tag {tid!r}: its source {spec.source!r} names no file of this run "
                        f"(files: {_listing(fd.layout.name for fd in files)}). Correct "
                        f"[tags.{tid}] source or pass that file.",
                        tag=tid,
                    )
                if spec.column not in _data_columns(named[0]):
                    raise DataError(
                        f"Tag {tid!r}: {named[0].layout.name} (its source) has no column "
                        f"{spec.column!r}. Correct [tags.{tid}] column or source.",
                        file=named[0].layout.path,
                        tag=tid,
                        column=spec.column,
                    )
                hits = named
            timed = [fd for fd in files if spec.column in fd.time_cols]
            if not hits and timed:
                raise DataError(
                    f"Tag {tid!r} of the plant file: its column {spec.column!r} is the time "
                    f"column of {timed[0].layout.name}, not a measurement. Correct "
                    f"[tags.{tid}] column.",
                    file=timed[0].layout.path,
                    tag=tid,
                    column=spec.column,
                )
            if not hits:
                raise DataError(
                    f"Tag {tid!r} of the plant file: no column {spec.column!r} in "
                    f"{_listing(fd.layout.name for fd in files)}. Add the column to the run "
                    f"files, or correct [tags.{tid}] column (or remove the tag).",
                    tag=tid,
                    column=spec.column,
                )
            if len(hits) > 1:
                raise DataError(
                    f"Tag {tid!r}: column {spec.column!r} is in "
                    f"{_listing(fd.layout.name for fd in hits)}. Say which file to use with "
                    f'source = "<file stem>" in [tags.{tid}].',
                    tag=tid,
                    column=spec.column,
                )
            fd = hits[0]
            unit, origin = _resolve_unit(fd, spec.column, tid, spec, units)
            if unit is None:
                raise DataError(
                    f"Tag {tid!r}: no unit for column {spec.column!r} of {fd.layout.name}: the "
                    'plant file gives none and the file has no units row. Add unit = "..." '
                    f"to [tags.{tid}] (or a units row under the header).",
                    file=fd.layout.path,
                    tag=tid,
                    column=spec.column,
                )
            fd.jobs.append(_TagJob(tid, spec.column, unit, origin, spec.quantity, spec))
        for fd in files:
            used = {j.header for j in fd.jobs}
            fd.ignored = [h for h in _data_columns(fd) if h not in used]
            if fd.ignored:
                log.append(
                    f"{fd.layout.name}: {len(fd.ignored)} column(s) that no plant tag names "
                    f"were not read: {_listing(fd.ignored)}"
                )
        return
    owner: dict[str, str] = {}
    for fd in files:
        for h in _data_columns(fd):
            if h in owner:
                raise DataError(
                    f"Column {h!r} is in both {owner[h]} and {fd.layout.name}. Without a plant "
                    "file the column names are the tag ids and must be unique; rename one, "
                    'or use a plant file whose tag gives source = "<file stem>".',
                    file=fd.layout.path,
                    column=h,
                )
            owner[h] = fd.layout.name
            unit, origin = _resolve_unit(fd, h, h, None, units)
            if unit is None:
                log.append(f"{fd.layout.name}: column {h!r} has no unit; kept as read")
                quantity = "dimensionless"
            else:
                quantity = parse_unit(unit).quantity
            fd.jobs.append(_TagJob(h, h, unit, origin, quantity, None))
