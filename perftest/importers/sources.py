"""Run data that are not CSV text: Excel workbooks, Parquet files and database tables.

Every source is turned into the same thing the CSV reader reads: a text table with a
header, an optional units row and one line per time stamp, written to a private
folder that lives as long as the Python process (``Run.raw`` reads it again on
demand, as it reads a CSV file). The cells are written as the source holds them
(numbers in their shortest round-trip form, time stamps in ISO 8601), so the CSV
path's checks, masks, units rows, quality columns and located errors apply to every
source alike. What the reader says about the staged text is then said about the
source: a message names the workbook and sheet with its row, the Parquet file with
its record, or the database with its result row, never the staged file.

The audit record fingerprints the source itself (SHA-256 of the workbook or Parquet
file; for a database, the URL without password, the query text and a SHA-256 of the
rows returned): see :class:`Origin`.

Layout of a database query's result (detected from its column names):

* **long**: ``time, tag, value[, quality]`` (one row per tag and stamp, as
  historians keep them); pivoted to one column per tag (quality flags become
  ``<tag>.quality`` columns, which the reader knows);
* **wide**: ``time`` plus one column per tag.

Rows are read and written in chunks of :data:`CHUNK_ROWS`, in time order (the query
is wrapped in ``SELECT * FROM (query) ORDER BY time``), so a year of one-second data
never sits in memory at once while it is staged.
"""

from __future__ import annotations

import atexit
import csv
import datetime as _dt
import hashlib
import math
import re
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path

from perftest.errors import DataError, InputError, PerftestError

__all__ = [
    "CHUNK_ROWS",
    "Origin",
    "StagedSource",
    "is_staged_kind",
    "safe_url",
    "sources_from_options",
    "database_file",
    "split_sheet",
    "stage_file",
    "stage_query",
]

#: rows read from a Parquet file or a database per chunk while staging
CHUNK_ROWS = 100_000

_STAGE_DIR: Path | None = None

#: file endings read through staging, and the kind of source each is
_KINDS = {".xlsx": "workbook", ".xlsm": "workbook", ".parquet": "parquet", ".pq": "parquet"}

_TIME_NAMES = ("time", "timestamp", "datetime", "date_time", "ts", "t_stamp", "stamp")


@dataclass(frozen=True)
class Origin:
    """Where staged run data came from (for messages and the audit record).

    Attributes
    ----------
    kind : {"workbook", "parquet", "database"}
    label : str
        How messages name the source: ``"run.xlsx, sheet 'Log'"``, ``"run.parquet"``,
        ``"database sqlite:///historian.db"``.
    row_word : str
        What a line of the staged text is called in the source: ``"row"`` (sheet
        row, 1-based, as the spreadsheet shows it), ``"record"`` (Parquet record,
        1-based, header excluded) or ``"result row"`` (database, 1-based).
    line_shift : int
        Source row = staged line + ``line_shift``.
    path : Path or None
        The source file (None for a database).
    url : str or None
        Database URL with the password hidden.
    query : str or None
        The query text as given.
    sha256 : str
        SHA-256 of the source file's bytes, or of the staged rows for a database.
    size : int or None
        [byte] of the source file.
    """

    kind: str
    label: str
    row_word: str
    line_shift: int
    path: Path | None = None
    url: str | None = None
    query: str | None = None
    sha256: str = ""
    size: int | None = None
    sheet: str | None = None


@dataclass(frozen=True)
class StagedSource:
    """A staged text table and the source it stands for."""

    path: Path
    origin: Origin


def is_staged_kind(path) -> bool:
    """Whether ``path`` is read through staging (by its ending)."""
    return split_sheet(Path(str(path)))[0].suffix.lower() in _KINDS


def is_workbook(path) -> bool:
    """Whether ``path`` names an Excel workbook (by its ending)."""
    return _KINDS.get(split_sheet(Path(str(path)))[0].suffix.lower()) == "workbook"


def _stage_dir() -> Path:
    global _STAGE_DIR
    if _STAGE_DIR is None or not _STAGE_DIR.is_dir():
        _STAGE_DIR = Path(tempfile.mkdtemp(prefix="perftest-staged-"))
        atexit.register(shutil.rmtree, _STAGE_DIR, True)
    return _STAGE_DIR


def _target(stem: str) -> Path:
    folder = Path(tempfile.mkdtemp(dir=_stage_dir()))
    return folder / f"{stem}.csv"


def _sha256(path: Path) -> tuple[str, int]:
    h = hashlib.sha256()
    n = 0
    with path.open("rb") as fh:
        while chunk := fh.read(1 << 20):
            h.update(chunk)
            n += len(chunk)
    return h.hexdigest(), n


def _cell(v) -> str:
    """One cell as text, the way a CSV export writes it."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return "1" if v else "0"
    if isinstance(v, float):
        if math.isnan(v):
            return ""
        return repr(v)
    if isinstance(v, _dt.datetime):
        return v.isoformat(sep=" ")
    if isinstance(v, _dt.date):
        return v.isoformat()
    if isinstance(v, _dt.time):
        return v.isoformat()
    return str(v)


def split_sheet(path: Path) -> tuple[Path, str | None]:
    """``book.xlsx#Log`` -> (book.xlsx, "Log"); a file that exists is taken whole."""
    text = str(path)
    if "#" in text and not path.exists():
        base, _, sheet = text.rpartition("#")
        if Path(base).suffix.lower() in (".xlsx", ".xlsm"):
            return Path(base), sheet
    return path, None


def database_file(source) -> Path | None:
    """The file an SQLite URL reads (``sqlite:///historian.db``), else None.

    Commands protect it from their outputs as they protect run files.
    """
    if not isinstance(source, str) or not source.strip():
        return None
    try:
        from sqlalchemy.engine import make_url

        url = make_url(source)
    except Exception:
        return None
    if url.get_backend_name() != "sqlite" or url.database in (None, "", ":memory:"):
        return None
    return Path(url.database)


# --- files -------------------------------------------------------------------------------


def stage_file(path, *, sheet: str | None = None) -> StagedSource:
    """Stage a workbook or Parquet file as a text table.

    Parameters
    ----------
    path : str or Path
        ``.xlsx``/``.xlsm`` (``book.xlsx#Sheet`` names a sheet) or ``.parquet``.
    sheet : str, optional
        Worksheet to read (default: the one named after ``#``, else the first).

    Returns
    -------
    StagedSource

    Raises
    ------
    DataError
        Missing or unreadable file, unknown sheet, empty sheet or table.
    """
    path, named = split_sheet(Path(path))
    sheet = sheet if sheet is not None else named
    if not path.is_file():
        raise DataError(f"{path}: run file not found.", file=path)
    kind = _KINDS.get(path.suffix.lower())
    if kind == "workbook":
        return _stage_workbook(path, sheet)
    if kind == "parquet":
        if sheet is not None:
            raise InputError(
                f"{path}: a Parquet file has no sheets; 'sheet' = {sheet!r} applies to "
                "workbooks only.",
                parameter="sheet",
            )
        return _stage_parquet(path)
    raise InputError(  # pragma: no cover - callers check is_staged_kind first
        f"{path}: not a workbook or Parquet file.", parameter="paths"
    )


def _stage_workbook(path: Path, sheet: str | None) -> StagedSource:
    try:
        import openpyxl
    except ImportError:  # pragma: no cover - a dependency
        raise DataError(
            f"{path}: reading workbooks needs the openpyxl package (pip install openpyxl).",
            file=path,
        ) from None
    try:
        book = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # zipfile.BadZipFile, KeyError, InvalidFileException, ...
        raise DataError(
            f"{path}: cannot be read as an Excel workbook ({type(exc).__name__}: {exc}). "
            "Save it again as .xlsx, or export the sheet as CSV.",
            file=path,
        ) from None
    try:
        names = list(book.sheetnames)
        if sheet is None:
            sheet = names[0]
        elif sheet not in names:
            raise DataError(
                f"{path}: the workbook has no sheet {sheet!r}; its sheets are "
                f"{', '.join(repr(n) for n in names)}.",
                file=path,
            )
        ws = book[sheet]
        target = _target(path.stem)
        rows = 0
        with target.open("w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh, lineterminator="\n")
            pending_blank = 0
            for row in ws.iter_rows(values_only=True):
                cells = [_cell(v) for v in row]
                while cells and cells[-1] == "":
                    cells.pop()
                if not cells:
                    # keep the row numbering: a blank line for a blank row, but not
                    # after the last row with data
                    pending_blank += 1
                    continue
                for _ in range(pending_blank):
                    fh.write("\n")
                pending_blank = 0
                writer.writerow(cells)
                rows += 1
    finally:
        book.close()
    if rows == 0:
        raise DataError(f"{path}: sheet {sheet!r} is empty.", file=path)
    sha, size = _sha256(path)
    origin = Origin(
        kind="workbook",
        label=f"{path.name}, sheet {sheet!r}",
        row_word="row",
        line_shift=0,
        path=path,
        sha256=sha,
        size=size,
        sheet=sheet,
    )
    return StagedSource(target, origin)


def _stage_parquet(path: Path) -> StagedSource:
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(path)
    except Exception as exc:  # ArrowInvalid, OSError
        raise DataError(
            f"{path}: cannot be read as a Parquet file ({type(exc).__name__}: {exc}).",
            file=path,
        ) from None
    schema = pf.schema_arrow
    names = list(schema.names)
    if not names:
        raise DataError(f"{path}: the Parquet file has no columns.", file=path)
    units = []
    for field in schema:
        meta = field.metadata or {}
        unit = meta.get(b"unit") or meta.get(b"units") or b""
        units.append(unit.decode("utf-8", "replace"))
    target = _target(path.stem)
    n = 0
    with target.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(names)
        shift = -1
        if any(units):
            writer.writerow(units)
            shift = -2
        for batch in pf.iter_batches(batch_size=CHUNK_ROWS):
            cols = [[_cell(v) for v in col.to_pylist()] for col in batch.columns]
            writer.writerows(zip(*cols, strict=True))
            n += batch.num_rows
    if n == 0:
        raise DataError(f"{path}: the Parquet file holds no rows.", file=path)
    sha, size = _sha256(path)
    origin = Origin(
        kind="parquet",
        label=path.name,
        row_word="record",
        line_shift=shift,
        path=path,
        sha256=sha,
        size=size,
    )
    return StagedSource(target, origin)


# --- databases -----------------------------------------------------------------------------


def safe_url(source) -> str:
    """A database URL (or an engine's or connection's) with the password hidden."""
    try:
        from sqlalchemy.engine import make_url

        if isinstance(source, str):
            return make_url(source).render_as_string(hide_password=True)
        engine = getattr(source, "engine", source)
        return engine.url.render_as_string(hide_password=True)
    except Exception:
        text = str(source)
        return re.sub(r"(://[^:/@]+:)[^@]*@", r"\1***@", text)


def _password(source) -> str | None:
    try:
        from sqlalchemy.engine import make_url

        if isinstance(source, str):
            return make_url(source).password
        return getattr(source, "engine", source).url.password
    except Exception:
        return None


def _scrub(text: str, password: str | None) -> str:
    text = re.sub(r"(://[^:/@\s]+:)[^@\s]*@", r"\1***@", text)
    if password:
        text = text.replace(str(password), "***")
    return text


def _connect(source):
    """(connection, close?) for a URL, an Engine or a Connection."""
    try:
        import sqlalchemy as sa
    except ImportError:  # pragma: no cover - a dependency
        raise InputError(
            "read_sql needs the SQLAlchemy package (pip install sqlalchemy).",
            parameter="source",
        ) from None
    label = safe_url(source)
    password = _password(source)
    if isinstance(source, str):
        try:
            engine = sa.create_engine(source)
        except Exception as exc:
            raise InputError(
                f"The 'source' parameter of read_sql must be a database URL such as "
                f"'sqlite:///historian.db' or 'postgresql+psycopg://user@host/db'. Got "
                f"{label!r} ({_scrub(str(exc), password)}).",
                parameter="source",
            ) from None
        try:
            return engine.connect(), engine
        except Exception as exc:
            engine.dispose()
            raise DataError(
                f"database {label}: cannot connect ({type(exc).__name__}: "
                f"{_scrub(str(exc).splitlines()[0] if str(exc) else '', password)}). Check the "
                "URL, that the server runs and that the user may log in.",
                file=label,
            ) from None
    if isinstance(source, sa.engine.Engine):
        try:
            return source.connect(), None
        except Exception as exc:
            raise DataError(
                f"database {label}: cannot connect ({type(exc).__name__}: "
                f"{_scrub(str(exc).splitlines()[0] if str(exc) else '', password)}).",
                file=label,
            ) from None
    if isinstance(source, sa.engine.Connection):
        return source, False
    raise InputError(
        "The 'source' parameter of read_sql must be an SQLAlchemy URL (str), Engine or "
        f"Connection. Got {type(source).__name__}.",
        parameter="source",
    )


def _find(columns: list[str], names) -> str | None:
    low = {c.lower().strip(): c for c in columns}
    for n in names:
        if n in low:
            return low[n]
    return None


def stage_query(
    source, query: str, *, time_column: str | None = None, name: str = "database"
) -> StagedSource:
    """Run ``query`` on a database and stage its rows as a text table (see module notes).

    Parameters
    ----------
    source : str, sqlalchemy Engine or Connection
        ``"sqlite:///historian.db"``, ``"postgresql+psycopg://user:pw@host/db"``, ...
    query : str
        A SELECT yielding ``time, tag, value[, quality]`` (long layout) or ``time`` plus
        one column per tag (wide layout).
    time_column : str, optional
        Name of the time column (default: ``time``, ``timestamp``, ... or the first).
    name : str
        Name of the source in the Run (``Run.raw[name]``, a tag's ``source`` key).

    Returns
    -------
    StagedSource

    Raises
    ------
    DataError
        The database cannot be reached, the query fails or returns no rows, or a column
        is missing. No message shows the password.
    """
    import sqlalchemy as sa

    if not isinstance(query, str) or not query.strip():
        raise InputError(
            "The 'query' parameter of read_sql must be the text of a SELECT statement. "
            f"Got {query!r}.",
            parameter="query",
        )
    label = safe_url(source)
    password = _password(source)
    q = query.strip().rstrip(";").strip()
    conn, owner = _connect(source)
    try:
        sub = sa.text(f"({q}) AS perftest_rows")
        try:
            probe = conn.execute(sa.select(sa.literal_column("*")).select_from(sub).limit(1))
            columns = list(probe.keys())
            probe.close()
        except Exception as exc:
            raise DataError(
                f"database {label}: the query failed ({type(exc).__name__}: "
                f"{_scrub(str(exc).splitlines()[0] if str(exc) else '', password)}). "
                f"Query: {q}",
                file=label,
            ) from None
        tcol = time_column or _find(columns, _TIME_NAMES) or (columns[0] if columns else None)
        if tcol is None or tcol not in columns:
            raise DataError(
                f"database {label}: the query yields no time column"
                + (f" {time_column!r}" if time_column else "")
                + f"; its columns are {', '.join(repr(c) for c in columns) or 'none'}. "
                "Name the time column 'time' or pass time_column.",
                file=label,
            )
        tag_col = _find(columns, ("tag", "tag_id", "tagname", "tag_name", "name", "point"))
        value_col = _find(columns, ("value", "val", "reading"))
        long = tag_col is not None and value_col is not None
        qual_col = _find(columns, ("quality", "status", "flag", "q")) if long else None
        if long and len(columns) > 3 + (qual_col is not None):
            extra = [c for c in columns if c not in (tcol, tag_col, value_col, qual_col)]
            raise DataError(
                f"database {label}: the query yields time, tag and value columns (long "
                f"layout) and also {', '.join(repr(c) for c in extra)}; select only time, "
                "tag, value and optionally quality.",
                file=label,
            )
        preparer = conn.dialect.identifier_preparer
        ordered = (
            sa.select(sa.literal_column("*"))
            .select_from(sub)
            .order_by(sa.literal_column(f"perftest_rows.{preparer.quote(tcol)}"))
        )
        try:
            result = conn.execution_options(stream_results=True).execute(ordered)
        except Exception as exc:
            raise DataError(
                f"database {label}: the query failed ({type(exc).__name__}: "
                f"{_scrub(str(exc).splitlines()[0] if str(exc) else '', password)}). "
                f"Query: {q}",
                file=label,
            ) from None
        if not re.fullmatch(r"[\w.-]+", name or ""):
            raise InputError(
                "The name of a database source must be letters, digits, '_', '-' or '.'. "
                f"Got {name!r}.",
                parameter="query",
            )
        target = _target(name)
        digest = hashlib.sha256()
        if long:
            n = _write_long(result, columns, tcol, tag_col, value_col, qual_col, target, digest)
        else:
            n = _write_wide(result, columns, tcol, target, digest)
        result.close()
    finally:
        if owner is not False:
            conn.close()
        if owner not in (None, False):
            owner.dispose()
    if n == 0:
        raise DataError(
            f"database {label}: the query returned no rows. Query: {q}",
            file=label,
        )
    origin = Origin(
        kind="database",
        label=f"database {label}" + (f" ({name})" if name != "database" else ""),
        row_word="result row",
        line_shift=-1,
        url=label,
        query=q,
        sha256=digest.hexdigest(),
    )
    return StagedSource(target, origin)


def _write_wide(result, columns, tcol, target, digest) -> int:
    order = [tcol] + [c for c in columns if c != tcol]
    pos = [columns.index(c) for c in order]
    n = 0
    with target.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        # the time column is written as "time", the name the reader looks for first
        writer.writerow(["time", *order[1:]])
        while rows := result.fetchmany(CHUNK_ROWS):
            out = [[_cell(r[i]) for i in pos] for r in rows]
            writer.writerows(out)
            digest.update(repr(out).encode())
            n += len(rows)
    return n


def _write_long(result, columns, tcol, tag_col, value_col, qual_col, target, digest) -> int:
    """Pivot ``time, tag, value[, quality]`` rows (in time order) to one line per stamp.

    Tags are found in a first pass over the staged long rows (kept on disk), so the
    header is known before the first wide line is written.
    """
    it, ig, iv = columns.index(tcol), columns.index(tag_col), columns.index(value_col)
    iq = columns.index(qual_col) if qual_col is not None else None
    long_path = target.with_suffix(".long")
    tags: dict[str, None] = {}
    n = 0
    with long_path.open("w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        while rows := result.fetchmany(CHUNK_ROWS):
            out = []
            for r in rows:
                tag = _cell(r[ig]).strip()
                if not tag:
                    continue
                tags.setdefault(tag, None)
                out.append(
                    (_cell(r[it]), tag, _cell(r[iv]), _cell(r[iq]) if iq is not None else "")
                )
            writer.writerows(out)
            digest.update(repr(out).encode())
            n += len(rows)
    names = list(tags)
    index = {t: k for k, t in enumerate(names)}
    header = ["time"]
    for t in names:
        header.append(t)
        if iq is not None:
            header.append(f"{t}.quality")
    width = len(names) * (2 if iq is not None else 1)
    with (
        long_path.open(newline="", encoding="utf-8") as src,
        target.open("w", newline="", encoding="utf-8") as fh,
    ):
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(header)
        stamp, line = None, None
        for t, tag, value, quality in csv.reader(src):
            if t != stamp:
                if line is not None:
                    writer.writerow([stamp, *line])
                stamp, line = t, [""] * width
            k = index[tag] * (2 if iq is not None else 1)
            line[k] = value
            if iq is not None:
                line[k + 1] = quality
        if line is not None:
            writer.writerow([stamp, *line])
    long_path.unlink()
    return n


# --- command line ---


def add_sql_arguments(parser) -> None:
    """``--sql URL`` and ``--query SQL`` (read the run from a database)."""
    parser.add_argument(
        "--sql",
        metavar="URL",
        help="read the run from a database: an SQLAlchemy URL such as "
        "sqlite:///historian.db (with --query; instead of or beside --data; default: none)",
    )
    parser.add_argument(
        "--query",
        metavar="[NAME=]SELECT",
        action="append",
        help="query yielding time, tag, value[, quality] rows or time plus one column per "
        "tag (repeat for several sources, each NAME=SELECT ...; required with --sql)",
    )


def sources_from_options(data, sql, queries) -> list:
    """Run files of ``--data`` (checked) and staged queries of ``--sql``/``--query``."""
    out = []
    for f in data or ():
        path = split_sheet(Path(f))[0]
        if not path.is_file():
            raise DataError(f"{f}: run file not found.", file=f)
        out.append(f)
    if bool(sql) != bool(queries):
        raise InputError("--sql URL and --query SELECT go together: give both or neither.")
    if sql:
        named = len(queries) > 1
        for q in queries:
            m = re.match(r"^\s*([\w.-]+)\s*=\s*(select\b.*)$", q, re.IGNORECASE | re.DOTALL)
            if m:
                out.append(stage_query(sql, m.group(2), name=m.group(1)))
            elif named:
                raise InputError(
                    f"--query {q[:40]!r}: with several queries, name each one: "
                    "--query NAME='SELECT ...'."
                )
            else:
                out.append(stage_query(sql, q))
    if not out:
        raise InputError("No run data: give --data RUN.csv, or --sql URL with --query.")
    return out


# --- messages ----------------------------------------------------------------------------------


def relabel(exc: PerftestError, staged: list[StagedSource]) -> PerftestError:
    """``exc`` as said of the sources rather than of their staged text."""
    msg = str(exc)
    file = getattr(exc, "file", None)
    line = getattr(exc, "line", None)
    for s in staged:
        o = s.origin
        name = s.path.name

        def fix(m, o=o):
            return f"{o.label}, {o.row_word} {int(m.group(1)) + o.line_shift}"

        msg = re.sub(rf"{re.escape(str(s.path))}, line (\d+)", fix, msg)
        msg = re.sub(rf"{re.escape(name)}, line (\d+)", fix, msg)
        msg = msg.replace(str(s.path), o.label).replace(str(s.path.parent) + "/", "")
        msg = re.sub(rf"(?<![\w.-]){re.escape(name)}(?![\w])", o.label, msg)
        if file is not None and Path(str(file)) == s.path:
            file = str(o.path) if o.path is not None else o.label
            if line is not None:
                line = int(line) + o.line_shift
    fields = {k: getattr(exc, k, None) for k in ("column", "tag", "key", "parameter")}
    try:
        return type(exc)(msg, file=file, line=line, **fields)
    except TypeError:  # a subclass with a constructor of its own: keep it, text only
        exc.args = (msg,)
        return exc


def relabel_text(text: str, staged: list[StagedSource]) -> str:
    """A log line or warning as said of the sources."""
    exc = relabel(PerftestError(text), staged)
    return str(exc)
