"""``read_run``: one or several run CSV files into one :class:`~perftest.run.core.Run`.

The steps, in order (docs/run-files.md states the rules for users):

1. sniff every file (separator, decimal mark, header, units row, encoding);
2. decide which column feeds which tag (plant file, or every column without one);
3. read the needed columns with pyarrow a piece at a time, value columns straight
   into one float64 array that becomes ``Run.data`` (no second copy of the file's
   numbers; ``Run.raw`` reads the file again when asked for);
4. parse the time stamps (offsets, zone, clock changes) to UTC; refuse backward
   steps, keep the first of duplicated stamps, note gaps;
5. mask bad cells (blank, sentinel, text, quality flag) with their reason;
6. calibration polynomial in the tag's unit, then conversion to SI (gauge
   pressures against the site's barometer tag or fixed atmospheric pressure);
7. align several files (or one, when ``every`` is given) on one time base.
"""

from __future__ import annotations

import dataclasses
import os
import warnings
from collections import Counter

import numpy as np
import pandas as pd

from perftest.errors import DataError, DataQualityWarning, InputError, PerftestError
from perftest.importers import sources
from perftest.importers.columns import (
    _MAX_LISTED,
    _as_paths,
    _as_sentinels,
    _as_step,
    _as_units,
    _check_zone,
    _FileData,
    _listing,
    _plan,
    _prepare,
    _time_columns,
)
from perftest.importers.convert import (
    _barometer,
    _Collector,
    _convert,
    _Exclusions,
    _fmt,
    _line_fn,
    _naive_utc,
)
from perftest.importers.csvfile import (
    TEXT_SHARE_WARNING,
    column_names,
    scan_table,
    sep_name,
    sniff,
)
from perftest.importers.raw import RawSource, RawTables
from perftest.importers.timebase import align, bin_index, parse_times

__all__ = ["read_run", "read_parts", "read_sql"]

# --- entry point ---------------------------------------------------------------------------


def read_run(
    paths,
    plant=None,
    *,
    time_column=None,
    timezone=None,
    sep=None,
    decimal=None,
    units=None,
    every=None,
    sentinels=None,
    sheet=None,
):
    """Read one or several run files into a :class:`~perftest.run.core.Run` (SI inside).

    Parameters
    ----------
    paths : str, Path or list of them
        Run files (historian export, portable logger, ...): CSV text, Excel workbooks
        (``.xlsx``; ``book.xlsx#Sheet`` names a sheet) and Parquet files (``.parquet``),
        told apart by their ending.
    plant : Plant, str or Path, optional
        Plant file (loaded or its path).  Its tags choose the columns, give units,
        calibrations, sentinels, the file a shared column comes from (``source``),
        the site time zone and the atmospheric reference.  Without a plant every
        column is kept, the tag id being the header.
    time_column : str or (str, str), optional
        Time column, or a (date column, time column) pair.  Found automatically
        when None: a column named time/timestamp/date/..., else the first column
        holding date-times; separate ``date`` and ``time`` columns are joined.
    timezone : str, optional
        IANA zone of stamps written without an offset (default: the plant's
        ``site.timezone``, else UTC).
    sep : str, optional
        Field separator; comma, semicolon or tab detected when None.
    decimal : str, optional
        ``"."`` or ``","``; decimal commas are detected with a ``;`` or tab separator.
    units : dict, optional
        Column (or tag) -> unit, for files without a units row.  Must agree with the
        units row and the plant file where those give one.
    every : str, Timedelta or float, optional
        Interval of the common time base (``"1min"``, seconds as a number).  Default:
        the coarsest file's median interval (several files), or the file's own stamps
        (one file).
    sentinels : iterable of float or str, optional
        Extra cell values that mean "bad sample", for every column.
    sheet : str, optional
        Worksheet of the workbooks (default: the one named after ``#`` in the path,
        else the first sheet).

    Returns
    -------
    Run
        ``data`` [SI] on a UTC index, ``raw`` per file (stem), ``mask``, ``exclusions``,
        ``log``, ``units`` (as logged), ``quantities``.

    Raises
    ------
    DataError
        Unreadable file, missing tag, bad time stamps, text columns, impossible
        absolute values, unit conflicts; the message names file, line, column or tag.
    UnitError
        Unknown unit text (names the column).
    InputError
        Bad argument.

    Notes
    -----
    Alignment rule (several files, or ``every`` given): the base interval
    :math:`\\Delta` is ``every`` or the longest median sampling interval of the files.
    The value at stamp :math:`t` is the mean of a source's unmasked samples stamped
    in :math:`(t-\\Delta, t]`.  Stamps are :math:`t_0 + k\\Delta` with :math:`t_0` the
    first stamp of the coarsest file (``every`` not given) or midnight 1970-01-01 UTC
    (``every`` given).  Nothing is interpolated: an interval without an unmasked
    sample is NaN and masked.  See docs/run-files.md.
    """
    from perftest.run.core import Run

    parts = read_parts(
        paths,
        plant,
        time_column=time_column,
        timezone=timezone,
        sep=sep,
        decimal=decimal,
        units=units,
        every=every,
        sentinels=sentinels,
        sheet=sheet,
    )
    for msg in parts.pop("warnings"):
        warnings.warn(DataQualityWarning(msg + ". See Run.log and Run.exclusions."), stacklevel=2)
    data = parts.pop("data")
    return Run(data, **parts)


def read_parts(
    paths,
    plant=None,
    *,
    time_column=None,
    timezone=None,
    sep=None,
    decimal=None,
    units=None,
    every=None,
    sentinels=None,
    sheet=None,
) -> dict:
    """The pieces :func:`read_run` builds its Run from (same parameters).

    Workbooks, Parquet files and staged database rows are read as the text tables
    :mod:`perftest.importers.sources` stages them as; every message, log line and
    warning then names the source (sheet and row, record, result row), not the stage.

    Returns
    -------
    dict
        ``data, raw, mask, exclusions, log, plant, units, quantities`` as the Run
        constructor takes them, plus ``warnings`` (messages not yet issued).
    """
    given = _as_paths(paths)
    if sheet is not None and not any(
        not isinstance(p, sources.StagedSource) and sources.is_workbook(p) for p in given
    ):
        raise InputError(
            "The 'sheet' parameter of read_run applies to workbooks (.xlsx, .xlsm); none of "
            f"the run files is one. Got sheet={sheet!r} for {', '.join(map(str, given))}.",
            parameter="sheet",
        )
    staged = []
    plain = []
    for p in given:
        if isinstance(p, sources.StagedSource):
            staged.append(p)
            plain.append(p.path)
        elif sources.is_staged_kind(p):
            s = sources.stage_file(p, sheet=sheet if sources.is_workbook(p) else None)
            staged.append(s)
            plain.append(s.path)
        else:
            plain.append(p)
    try:
        parts = _read_parts(
            plain,
            plant,
            time_column=time_column,
            timezone=timezone,
            sep=sep,
            decimal=decimal,
            units=units,
            every=every,
            sentinels=sentinels,
        )
    except PerftestError as exc:
        if not staged:
            raise
        raise sources.relabel(exc, staged) from None
    if not staged:
        return parts
    origin = {s.path: s.origin for s in staged}
    raw = parts["raw"]
    parts["raw"] = RawTables(
        {
            stem: dataclasses.replace(src, origin=origin.get(src.layout.path))
            for stem in raw
            for src in (raw.source(stem),)
        }
    )
    notes = [
        f"{s.path.stem}: read from {s.origin.label}"
        + (f" (SHA-256 {s.origin.sha256[:16]}...)" if s.origin.path is not None else "")
        + (f", query: {s.origin.query}" if s.origin.query else "")
        + f"; its cells were staged as text and read as a CSV file ({s.origin.row_word} "
        "numbers in messages are the source's)"
        for s in staged
    ]
    parts["log"] = notes + [sources.relabel_text(x, staged) for x in parts["log"]]
    parts["warnings"] = [sources.relabel_text(x, staged) for x in parts["warnings"]]
    return parts


def _read_parts(
    paths,
    plant=None,
    *,
    time_column=None,
    timezone=None,
    sep=None,
    decimal=None,
    units=None,
    every=None,
    sentinels=None,
) -> dict:
    """:func:`read_parts` on text files only."""
    if isinstance(plant, str | os.PathLike):
        from perftest.plant.file import load_plant

        plant = load_plant(plant)
    if plant is not None and not hasattr(plant, "tags"):
        raise InputError(
            "The 'plant' parameter of read_run must be a Plant (perftest.load_plant) or the "
            f"path of a plant file. Got {type(plant).__name__}.",
            parameter="plant",
        )
    path_list = _as_paths(paths)
    step = _as_step(every)
    extra_sentinels = _as_sentinels(sentinels)
    unit_map = _as_units(units)
    if sep is not None and not (isinstance(sep, str) and len(sep) == 1 and sep not in '"\n\r'):
        raise InputError(
            f"The 'sep' parameter of read_run must be one character such as ',', ';' or "
            f"'\\t'. Got {sep!r}.",
            parameter="sep",
        )
    if decimal is not None and decimal not in (".", ","):
        raise InputError(
            f"The 'decimal' parameter of read_run must be '.' or ','. Got {decimal!r}.",
            parameter="decimal",
        )
    if timezone is not None:
        tz = _check_zone(timezone, "The 'timezone' parameter of read_run")
        tz_origin = "timezone argument"
    elif plant is not None and getattr(plant.site, "timezone", None):
        tz = _check_zone(plant.site.timezone, "site.timezone of the plant file")
        tz_origin = "plant site.timezone"
    else:
        tz, tz_origin = "UTC", "default"

    log: list[str] = []
    pending_warnings: list[str] = []
    layouts = [sniff(p, sep=sep, decimal=decimal) for p in path_list]
    stems = Counter(lay.stem for lay in layouts)
    for stem, n in stems.items():
        if n > 1:
            names = [str(lay.path) for lay in layouts if lay.stem == stem]
            raise DataError(
                f"{n} run files share the name {stem!r} ({', '.join(names)}); files are told "
                "apart by name (Run.raw, tag source). Rename one of them.",
                file=names[1],
            )
    plant_columns = {t.column for t in plant.tags.values()} if plant is not None else set()
    files = [_prepare(lay, _time_columns(lay, time_column), plant_columns) for lay in layouts]
    for fd in files:
        lay = fd.layout
        log.extend(lay.notes)
        log.append(
            f"{lay.name}: {sep_name(lay.sep)} separated, decimal {lay.decimal!r}, header on line "
            f"{lay.header_line}, "
            + ("units row below it, " if lay.units_row is not None else "no units row, ")
            + f"time from {' + '.join(repr(c) for c in fd.time_cols)}"
        )
        if lay.header and not lay.header[-1]:
            # a trailing separator on the header line: the last column has no name
            # and is not read; say so, so that nothing goes unnoticed
            log.append(
                f"{lay.name}: the last column (column {len(lay.header)}) has no name in the "
                "header and was not read"
            )
        if fd.quality:
            log.append(
                f"{lay.name}: quality columns "
                + ", ".join(f"{q!r} -> {b!r}" for b, q in fd.quality.items())
            )
    _plan(files, plant, unit_map, log)

    stats = {"masked": {}, "samples": {}, "text": {}}
    raw: dict[str, RawSource] = {}
    for fd in files:
        lay = fd.layout
        value_cols = list(dict.fromkeys(j.header for j in fd.jobs))
        quality_cols = [fd.quality[h] for h in value_cols if h in fd.quality]
        fd.collector = _Collector(fd, extra_sentinels)
        scan = scan_table(lay, value_cols, fd.time_cols, fd.collector, flag_cols=quality_cols)
        fd.text_cols = scan.text_cols
        fd.values = fd.collector.values[: scan.rows]
        line_of = _line_fn(lay)
        fd.times = parse_times(
            fd.collector.time_texts(),
            layout=lay,
            column=" + ".join(fd.time_cols),
            timezone=tz,
            line_of=line_of,
        )
        fd.collector.times = None
        ti = fd.times
        log.append(
            f"{lay.name}: {scan.rows} rows, {ti.times[0]} to {ti.times[-1]} UTC, "
            f"median interval {_fmt(ti.median) if ti.median is not None else 'n/a'}; stamps "
            f"read as {ti.zone_rule}"
            + (f" ({tz_origin})" if ti.zone_rule.startswith("local") else "")
        )
        if fd.text_cols:
            log.append(
                f"{lay.name}: column(s) holding text were checked cell by cell: "
                f"{_listing(fd.text_cols)}"
            )
        if ti.duplicate_rows.size:
            d = ti.duplicate_rows[:_MAX_LISTED]
            lines = line_of(np.r_[d, ti.duplicate_of[:_MAX_LISTED]])
            pairs = ", ".join(
                f"{a} (repeats {b})" for a, b in zip(lines[: d.size], lines[d.size :], strict=True)
            )
            more = " ..." if ti.duplicate_rows.size > _MAX_LISTED else ""
            msg = (
                f"{lay.name}: {ti.duplicate_rows.size} row(s) repeat an earlier time stamp; "
                f"the first row of each stamp is kept, the repeats are excluded (lines "
                f"{pairs}{more})"
            )
            log.append(msg)
            pending_warnings.append(msg)
        if ti.gaps:
            shown = "; ".join(f"{_fmt(g[1])} after {g[0]}" for g in ti.gaps[:_MAX_LISTED]) + (
                " ..." if len(ti.gaps) > _MAX_LISTED else ""
            )
            log.append(
                f"{lay.name}: {len(ti.gaps)} gap(s) longer than 1.5 x the median interval: {shown}"
            )
        wanted = {*fd.time_cols, *quality_cols, *value_cols}
        columns = tuple(c for c in column_names(lay) if c in wanted)
        raw[lay.stem] = RawSource(lay, columns, ti.times, scan.size, scan.crc32)
        # column-major like the values: each tag's flags are contiguous
        fd.mask = np.empty((len(fd.jobs), int(ti.keep.sum())), dtype=bool).T

    excl = _Exclusions()
    baro = _barometer(files, plant, excl, stats, log)

    for fd in files:
        line_of = _line_fn(fd.layout)
        for j, job in enumerate(fd.jobs):
            if j not in fd.done:
                _convert(fd, j, job, plant, baro, excl, stats, line_of)
            if fd.collector.grouped.get(j):
                log.append(
                    f"{fd.layout.name}, column {job.header!r}: {fd.collector.grouped[j]} "
                    "cell(s) with thousands separators read as numbers"
                )
            n_text, n_all = stats["text"].get(job.tag, 0), stats["samples"].get(job.tag, 0)
            if fd.mask[:, j].all():
                msg = f"{fd.layout.name}: tag {job.tag!r} has no valid sample"
                log.append(msg)
                pending_warnings.append(msg)
            elif n_all and n_text > TEXT_SHARE_WARNING * n_all:
                msg = (
                    f"{fd.layout.name}, column {job.header!r}: tag {job.tag!r} lost {n_text} of "
                    f"{n_all} samples ({100 * n_text / n_all:.0f} %, more than "
                    f"{100 * TEXT_SHARE_WARNING:g} %) to text cells that are not numbers; see "
                    "the run's exclusions for the cells, and fix the export or pass sep=/decimal="
                )
                log.append(msg)
                pending_warnings.append(msg)
        fd.values = fd.values[: fd.mask.shape[0]]  # the kept rows
        fd.collector = None
        masked = sum(stats["masked"][j.tag] for j in fd.jobs)
        if masked:
            reasons = Counter()
            for part in excl.parts:
                if part[4] == fd.layout.stem:
                    reasons.update(r.split(" (line")[0].split(";")[0] for r in part[2])
            top = ", ".join(f"{k}: {v}" for k, v in reasons.most_common(8))
            log.append(f"{fd.layout.name}: {masked} sample(s) masked ({top})")

    data, mask = _combine(files, step, excl, log)
    run_units = {j.tag: (j.unit or "") for fd in files for j in fd.jobs}
    quantities = {j.tag: j.quantity for fd in files for j in fd.jobs}
    return {
        "data": data,
        "raw": RawTables(raw),
        "mask": mask,
        "exclusions": excl.frame(),
        "log": log,
        "plant": plant,
        "units": run_units,
        "quantities": quantities,
        "warnings": pending_warnings,
    }


def _combine(files: list[_FileData], step, excl: _Exclusions, log: list[str]):
    """One SI frame and mask: a single file as stamped, or all files on one time base."""
    if len(files) == 1 and step is None:
        fd = files[0]
        index = fd.times.times[fd.times.keep]
        cols = pd.Index([j.tag for j in fd.jobs], name="tag")
        data = pd.DataFrame(fd.values, index=index, columns=cols, copy=False)
        mask = pd.DataFrame(fd.mask, index=index, columns=cols, copy=False)
        return data, mask

    kept = [fd.times.times[fd.times.keep] for fd in files]
    if step is None:
        medians = [(fd.times.median, i) for i, fd in enumerate(files) if fd.times.median]
        if not medians:
            raise DataError(
                "Every run file holds a single time stamp, so no common time base can be "
                "found. Pass every= (e.g. every='1min').",
            )
        step, coarse = max(medians, key=lambda x: (x[0], -x[1]))
        origin = kept[coarse][0]
        anchor = f"the first stamp of {files[coarse].layout.name} ({origin})"
    else:
        origin = pd.Timestamp(0, tz="UTC")
        anchor = "midnight 1970-01-01 UTC"
    spans = [(t[0], t[-1]) for t in kept]
    lo, hi = max(s[0] for s in spans), min(s[1] for s in spans)
    if len(files) > 1 and lo > hi + step:
        desc = "; ".join(
            f"{fd.layout.name}: {s[0]} to {s[1]}" for fd, s in zip(files, spans, strict=True)
        )
        raise DataError(
            f"The run files do not overlap in time ({desc}, UTC). Check the time zone of "
            "files without UTC offsets (timezone=, site.timezone) or pass files of one run.",
        )
    ks = [bin_index(t, origin, step) for t in kept]
    k0 = min(int(k[0]) for k in ks)
    n_bins = max(int(k[-1]) for k in ks) - k0 + 1
    index = pd.DatetimeIndex(origin + (k0 + np.arange(n_bins)) * step, name="time").as_unit("ns")
    m_total = sum(len(fd.jobs) for fd in files)
    values = np.empty((m_total, n_bins)).T
    mask = np.empty((m_total, n_bins), dtype=bool).T
    cols = []
    j0 = 0
    labels = _naive_utc(index)
    for fd, k in zip(files, ks, strict=True):
        m = len(fd.jobs)
        mean, count = align(fd.values, ~fd.mask, k, k0, n_bins)
        values[:, j0 : j0 + m] = mean
        empty = count == 0
        mask[:, j0 : j0 + m] = empty
        rows_in_bin = np.bincount(k - k0, minlength=n_bins)
        # stamps before the file's first or after its last interval are outside its
        # record (another file fills them): empty there, but no excluded sample
        inside = np.zeros(n_bins, dtype=bool)
        inside[int(k[0]) - k0 : int(k[-1]) - k0 + 1] = True
        if not inside.all():
            log.append(
                f"{fd.layout.name}: {int((~inside).sum())} stamp(s) of the time base lie "
                "outside its record (only other files fill them); its tags are empty there, "
                "not excluded samples"
            )
        for j, job in enumerate(fd.jobs):
            # intervals whose samples are all masked are explained by those samples'
            # own exclusions; only intervals without any sample get a row here
            e = np.flatnonzero(empty[:, j] & (rows_in_bin == 0) & inside)
            if e.size:
                reason = f"no sample of {fd.layout.name} in the interval"
                excl.add(labels[e], job.tag, reason, np.nan, fd.layout.stem)
            cols.append(job.tag)
        fd.values = fd.mask = None
        j0 += m
    log.append(
        f"time base: {_fmt(step)} intervals (t - {_fmt(step)}, t] stamped at their end, "
        f"anchored at {anchor}; each value is the mean of a file's unmasked samples in the "
        f"interval; nothing is interpolated ({n_bins} stamps)"
    )
    cols = pd.Index(cols, name="tag")
    data = pd.DataFrame(values, index=index, columns=cols, copy=False)
    mask = pd.DataFrame(mask, index=index, columns=cols, copy=False)
    return data, mask


def read_sql(source, query: str, plant=None, **kwargs):
    """Read a Run from a database table or query (staged as in :mod:`perftest.importers.sources`).

    Parameters
    ----------
    source : str, sqlalchemy Engine or Connection
        An SQLAlchemy URL such as ``"sqlite:///historian.db"`` or
        ``"postgresql+psycopg://user@host/plantdb"``, or an open engine or connection.
    query : str or dict of str
        A SELECT yielding ``time, tag, value[, quality]`` rows (long layout) or ``time``
        plus one column per tag (wide layout; detected from the column names). A dict
        ``{name: query}`` reads several sources (say, a historian and a logger at other
        rates) and aligns them as :func:`perftest.read_run` aligns several files; each
        name plays the part of a file's stem.
    plant : Plant, str or Path, optional
        As for :func:`perftest.read_run`.
    **kwargs
        Other keywords of :func:`perftest.read_run` (``timezone``, ``units``, ``every``,
        ``sentinels``, ``time_column``).

    Returns
    -------
    Run
        As :func:`perftest.read_run`; ``Run.raw["database"]`` holds the rows as staged
        text, and the audit record names the URL (password hidden) and the query.

    Raises
    ------
    DataError
        Unreachable database, failing query, no rows, a missing column, or a tag the
        plant file names but the result lacks; no message shows the password.

    Examples
    --------
    >>> run = perftest.read_sql(  # doctest: +SKIP
    ...     "sqlite:///historian.db",
    ...     "SELECT time, tag, value, quality FROM samples "
    ...     "WHERE time >= '2026-05-14 09:00' AND time < '2026-05-14 13:00'",
    ...     plant,
    ... )
    """
    kwargs = dict(kwargs)
    time_column = kwargs.pop("time_column", None)
    if isinstance(query, dict):
        if not query:
            raise InputError(
                "The 'query' parameter of read_sql must be a query or a non-empty dict of "
                "them. Got an empty dict.",
                parameter="query",
            )
        staged = [
            sources.stage_query(source, q, time_column=time_column, name=str(k))
            for k, q in query.items()
        ]
    else:
        staged = sources.stage_query(source, query, time_column=time_column)
    return read_run(staged, plant, **kwargs)
