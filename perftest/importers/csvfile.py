"""Reading one run CSV: layout detection and the pyarrow fast path.

The reader never looks at every cell in Python.  pyarrow parses the file piece by
piece (:func:`scan_table`, a few MB at a time, so that the parsed text never sits
in memory whole) with the value columns typed as float64; only where pyarrow
refuses a column (it holds text) is that column read as text from that piece on
and classified (:mod:`perftest.importers.cells`), once per distinct text, not per
cell.
"""

from __future__ import annotations

import csv
import re
import zlib
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from perftest.errors import DataError, InputError, UnitError
from perftest.importers.cells import NAN_TEXTS

__all__ = [
    "FileLayout",
    "sniff",
    "scan_table",
    "ScanResult",
    "column_names",
    "arrow_options",
    "lines_of_rows",
]


_QUALITY_RE = re.compile(
    r"^(?P<base>.+?)(?:\.q|\.quality|_quality| quality|\.status|_status| status)$",
    re.IGNORECASE,
)

_SEPARATORS = (",", ";", "\t")
_SEP_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}
#: A tag that loses more than this share of its samples to text cells that are no
#: known sentinel (unreadable numbers, a changed export format) is warned about: the
#: mean then rests on a different set of samples than the log suggests.  One percent
#: is a judgement (common practice, no source): isolated odd cells stay in the
#: exclusion table without a warning.
TEXT_SHARE_WARNING = 0.01

_COMMA_NUMBER = re.compile(r"^[+-]?\d+,\d+(?:[eE][+-]?\d+)?$")
_DOT_NUMBER = re.compile(r"^[+-]?\d*\.\d+(?:[eE][+-]?\d+)?$")
_CONVERSION_ERROR = re.compile(r"In CSV column #(\d+): CSV conversion error")
_HEAD_BYTES = 1 << 16
# A header wider than the first read (thousands of tags with long names) makes the
# head grow until it holds the header and a few data lines, up to this size.
_MAX_HEAD_BYTES = 1 << 26
_HEAD_LINES = 6
_SAMPLE_LINES = 50
_LINE_END = re.compile(rb"\r\n|\n|\r")
# Bytes parsed at a time by scan_table, and pyarrow's block size inside a piece (its
# threads parse the blocks of a piece in parallel, and the next piece while this one is
# copied).  On two cores, 2 MB pieces kept the peak memory of a 10-million-value file
# near 1.5 x its SI frame (4 MB: up to 1.9 x) at 1.0-1.25 x the time of pandas;
# 1 MB pieces took 1.4 x (overhead per piece).  Chosen by measurement
# (benchmarks/bench_import.py).
CHUNK_BYTES = 1 << 21
_BLOCK_BYTES = 1 << 20


def sep_name(sep: str) -> str:
    """Readable name of a separator for messages."""
    return _SEP_NAMES.get(sep, repr(sep))


@dataclass
class FileLayout:
    """What :func:`sniff` found out about a run file before reading it."""

    path: Path
    encoding: str
    sep: str
    decimal: str
    header_line: int  # 1-based line number of the header
    header: list[str]
    units_row: list[str] | None
    first_data_line: int  # 1-based line number of the first data row
    sample_rows: list[list[str]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    data_offset: int = 0  # byte offset of the first data line
    row_bytes: float = 0.0  # mean bytes per data line in the first rows (size estimate)

    @property
    def name(self) -> str:
        return self.path.name

    @property
    def stem(self) -> str:
        return self.path.stem

    def where(self, line: int | None = None, column: str | None = None) -> str:
        """Place prefix for messages: ``"run.csv, line 17, column 'TT-101'"``."""
        parts = [self.name]
        if line is not None:
            parts.append(f"line {line}")
        if column is not None:
            parts.append(f"column {column!r}")
        return ", ".join(parts)


def _number(text: str, decimal: str) -> bool:
    t = text.strip()
    if decimal == ",":
        t = t.replace(",", ".")
    try:
        float(t)
    except ValueError:
        return False
    return t.casefold() not in NAN_TEXTS


def _split(line: str, sep: str) -> list[str]:
    return next(csv.reader([line], delimiter=sep, quotechar='"'), [])


def _lines(head: bytes) -> int:
    """At least the number of line ends in ``head`` (a CR LF counts twice)."""
    return head.count(b"\n") + head.count(b"\r")


def _decode_head(path: Path, head: bytes, whole: bool) -> tuple[str, str]:
    if head.startswith((b"\xff\xfe", b"\xfe\xff")):
        # "Unicode text" exports of spreadsheet programs are UTF-16 with this mark
        raise DataError(
            f"{path.name}: the file is UTF-16 text (it starts with a UTF-16 byte order "
            "mark). Save or export it as UTF-8 (or ANSI) CSV and read it again.",
            file=path,
        )
    if b"\x00" in head:
        raise DataError(
            f"{path.name}: the file looks binary (it holds NUL bytes), not a text CSV. "
            "Export the log as a comma, semicolon or tab separated text file.",
            file=path,
        )
    # Cut at the last newline so that a multi-byte character split by the read
    # does not look like an encoding error.
    cut = head.rfind(b"\n")
    body = head if cut < 0 or whole else head[: cut + 1]
    for encoding in ("utf-8-sig", "cp1252"):
        try:
            return body.decode(encoding), encoding
        except UnicodeDecodeError:
            continue
    return body.decode("latin-1"), "latin-1"


def sniff(path, *, sep: str | None = None, decimal: str | None = None) -> FileLayout:
    """Find separator, decimal mark, header, units row and encoding of a run file.

    Parameters
    ----------
    path : str or Path
        The CSV file.
    sep : str, optional
        Field separator; detected among comma, semicolon and tab when None.
    decimal : str, optional
        Decimal mark ``"."`` or ``","``; detected when None (a comma only with a
        semicolon or tab separator).

    Returns
    -------
    FileLayout

    Raises
    ------
    DataError
        Missing, empty or binary file, a header without data, an unnamed or
        duplicated column, a single-column file.
    """
    path = Path(path)
    if not path.exists():
        raise DataError(
            f"{path}: the run file does not exist. Check the path and the file name.", file=path
        )
    if not path.is_file():
        raise DataError(
            f"{path}: is not a file (a directory?). Give the path of a CSV file.", file=path
        )
    with open(path, "rb") as fh:
        limit = _HEAD_BYTES
        head = fh.read(limit)
        while len(head) == limit and _lines(head) < _HEAD_LINES and limit < _MAX_HEAD_BYTES:
            head += fh.read(limit)
            limit *= 2
    whole = len(head) < limit
    if not whole and _lines(head) < 2:
        raise DataError(
            f"{path.name}: the first lines are longer than {_MAX_HEAD_BYTES >> 20} MB; this "
            "is not a run file with one line per time stamp (or its line ends are not "
            "recognised). Export it again as CSV.",
            file=path,
        )
    if not head.strip():
        raise DataError(
            f"{path.name}: the file is empty. Export the run again; it needs a header line "
            "with the column names and one line per time stamp.",
            file=path,
        )
    text, encoding = _decode_head(path, head, whole)
    lines = text.splitlines()
    notes = []
    if encoding != "utf-8-sig":
        notes.append(f"{path.name}: not valid UTF-8, read as {encoding}")

    # Leading comment lines ("# exported by ...") and blank lines come before the header.
    k = 0
    while k < len(lines) and (not lines[k].strip() or lines[k].lstrip().startswith("#")):
        k += 1
    if k == len(lines):
        raise DataError(
            f"{path.name}: the file holds only blank or comment lines. It needs a header "
            "line with the column names and one line per time stamp.",
            file=path,
        )
    header_line = k + 1
    sample = [ln for ln in lines[k + 1 : k + 1 + _SAMPLE_LINES] if ln.strip()]
    # With a full head buffer the last line may be cut short: leave it out.
    if not whole and len(sample) > 1:
        sample = sample[:-1]

    if sep is None:
        sep = _detect_sep(path, lines[k], sample)
    header = [h.strip() for h in _split(lines[k], sep)]
    if len(header) < 2:
        raise DataError(
            f"{path.name}, line {header_line}: the header holds a single column {header[0]!r}; "
            "a run file needs a time column and at least one value column. Check the "
            "separator (detected comma, semicolon or tab) or pass sep=.",
            file=path,
            line=header_line,
        )
    for i, name in enumerate(header):
        if not name and i < len(header) - 1:
            raise DataError(
                f"{path.name}, line {header_line}: column {i + 1} has no name. "
                "Give every column a name in the header.",
                file=path,
                line=header_line,
            )
    seen: dict[str, int] = {}
    for i, name in enumerate(header):
        if name in seen:
            raise DataError(
                f"{path.name}, line {header_line}: the column name {name!r} appears twice "
                f"(columns {seen[name] + 1} and {i + 1}). Rename one of them.",
                file=path,
                line=header_line,
                column=name,
            )
        seen[name] = i

    rows = [_split(ln, sep) for ln in sample]
    if decimal is None:
        decimal = _detect_decimal(path, sep, rows)
    elif decimal not in (".", ","):
        raise InputError(
            f"The 'decimal' parameter of read_run must be '.' or ','. Got {decimal!r}.",
            parameter="decimal",
        )
    if decimal == "," and sep == ",":
        raise InputError(
            "The 'decimal' parameter of read_run is ',' but the separator is also ','. "
            "Pass sep=';' (or the file's separator).",
            parameter="decimal",
        )

    units_row = None
    if rows and _looks_like_units(rows[0], decimal):
        units_row = [c.strip() for c in rows[0]] + [""] * (len(header) - len(rows[0]))
        units_row = units_row[: len(header)]
        rows = rows[1:]
    first_data_line = _line_after(lines, header_line, 2 if units_row is not None else 1)
    if not rows:
        raise DataError(
            f"{path.name}: the file has a header (line {header_line}) but no data rows. "
            "Export the run again with its samples.",
            file=path,
        )
    data_offset, row_bytes = _data_span(head, first_data_line, whole)
    return FileLayout(
        path=path,
        encoding="utf8" if encoding == "utf-8-sig" else encoding,
        sep=sep,
        decimal=decimal,
        header_line=header_line,
        header=header,
        units_row=units_row,
        first_data_line=first_data_line,
        sample_rows=rows,
        notes=notes,
        data_offset=data_offset,
        row_bytes=row_bytes,
    )


def _data_span(head: bytes, first_data_line: int, whole_file: bool) -> tuple[int, float]:
    """Byte offset of the first data line, and mean bytes per non-blank data line.

    Lines end at ``\r\n``, ``\n`` or ``\r`` as pyarrow reads them.  The mean is
    taken over the data lines wholly inside ``head`` (the last one too when
    ``head`` is the whole file).
    """
    ends = [m.end() for m in _LINE_END.finditer(head)]
    if whole_file and (not ends or ends[-1] < len(head)):
        ends.append(len(head))
    k = first_data_line - 1  # line ends before the first data line
    offset = ends[k - 1] if 0 < k <= len(ends) else 0
    starts = [offset, *ends[k:-1]] if k < len(ends) else []
    lines = [
        (a, b)
        for a, b in zip(starts, ends[k:], strict=False)
        if head[a:b].strip(b"\r\n")  # blank lines hold no row
    ]
    if lines:
        row_bytes = (lines[-1][1] - offset) / len(lines)
    else:  # one data line longer than the head: at least that long
        row_bytes = float(max(len(head) - offset, 1))
    return offset, row_bytes


def _line_after(lines: list[str], header_line: int, skip_nonblank: int) -> int:
    """1-based line number of the first data line (skipping blank lines)."""
    i = header_line  # 0-based index of the line after the header
    count = 0
    while i < len(lines):
        if lines[i].strip():
            count += 1
            if count == skip_nonblank:
                return i + 1
        i += 1
    return i + 1


def _detect_sep(path: Path, header: str, sample: list[str]) -> str:
    best, best_n = None, 1
    for cand in _SEPARATORS:
        n = len(_split(header, cand))
        if n <= best_n:
            continue
        counts = {len(_split(ln, cand)) for ln in sample}
        # every sampled data line must split into as many fields as the header
        if counts and counts != {n}:
            continue
        best, best_n = cand, n
    if best is None:
        # fall back to the separator most frequent in the header
        best = max(_SEPARATORS, key=header.count)
        if header.count(best) == 0:
            raise DataError(
                f"{path.name}: no comma, semicolon or tab found in the header line; a run "
                "file needs a time column and at least one value column. Pass sep= if the "
                "file uses another separator.",
                file=path,
            )
    return best


def _detect_decimal(path: Path, sep: str, rows: list[list[str]]) -> str:
    if sep == ",":
        return "."
    n_comma = n_dot = 0
    for row in rows:
        for cell in row:
            c = cell.strip()
            if _COMMA_NUMBER.match(c):
                n_comma += 1
            elif _DOT_NUMBER.match(c):
                n_dot += 1
    if n_comma and n_dot:
        raise DataError(
            f"{path.name}: the first rows mix decimal commas ({n_comma} cells like '12,5') and "
            f"decimal points ({n_dot} cells like '12.5'). Pass decimal=',' or decimal='.'.",
            file=path,
        )
    return "," if n_comma else "."


def _looks_like_units(cells: list[str], decimal: str) -> bool:
    """A second line is a units row when no cell is a number and most cells are units."""
    from perftest.units import parse_unit

    filled = [c.strip() for c in cells if c.strip()]
    if not filled or any(_number(c, decimal) for c in filled):
        return False
    ok = 0
    for c in filled:
        try:
            parse_unit(c)
            ok += 1
        except UnitError:
            pass
    # the time column's cell ("", "UTC", "yyyy-mm-dd hh:mm") need not be a unit
    return ok > 0 and 2 * ok >= len(filled) - 1


def quality_base(name: str, header: set[str]) -> str | None:
    """Column a quality/status column belongs to, or None (``"TT-101.Q"`` -> ``"TT-101"``)."""
    m = _QUALITY_RE.match(name)
    if m and m.group("base").strip() in header:
        return m.group("base").strip()
    return None


def column_names(layout: FileLayout) -> list[str]:
    """Column names as pyarrow sees them (an unnamed last column gets a placeholder)."""
    return [h if h else f"__unnamed_{i}" for i, h in enumerate(layout.header)]


def arrow_options(layout: FileLayout, include: list[str], types: dict, *, blank_is_null=False):
    """pyarrow read, parse and convert options for the data lines of a run file.

    The input starts at the first data line (``layout.data_offset``).  Empty cells
    are null in float columns; in text columns they are ``""`` unless
    ``blank_is_null``.
    """
    read = pacsv.ReadOptions(
        column_names=column_names(layout), encoding=layout.encoding, block_size=_BLOCK_BYTES
    )
    parse = pacsv.ParseOptions(delimiter=layout.sep, quote_char='"', ignore_empty_lines=True)
    convert = pacsv.ConvertOptions(
        include_columns=include,
        column_types=types,
        null_values=[""],
        strings_can_be_null=blank_is_null,
        quoted_strings_can_be_null=False,
        decimal_point=layout.decimal,
    )
    return read, parse, convert


@dataclass
class ScanResult:
    """What :func:`scan_table` read: row count, text columns and the file's fingerprint."""

    rows: int  # data rows (blank lines are not rows)
    text_cols: list[str]  # value columns that had to be read as text (from some piece on)
    size: int  # bytes in the file
    crc32: int  # zlib CRC-32 of the whole file


def scan_table(
    layout: FileLayout,
    value_cols: list[str],
    text_cols: list[str],
    sink: Callable[[pa.Table, int], None],
    *,
    flag_cols: list[str] = (),
    chunk_bytes: int | None = None,
) -> ScanResult:
    """Parse the chosen columns with pyarrow, a piece of the file at a time.

    Parameters
    ----------
    layout : FileLayout
        From :func:`sniff`.
    value_cols : list of str
        Read as float64.  Where pyarrow refuses a cell (text in the column), the
        piece is parsed again with that column as text, and the column stays text
        for the rest of the file.
    text_cols : list of str
        Always read as text (time columns).
    sink : callable
        ``sink(table, first_row)``: a parsed piece (pyarrow Table, columns in file
        order) and the index of its first data row.  The table must not be kept:
        the sink copies what it needs.
    flag_cols : list of str
        Read as dictionary-encoded text (quality columns hold few distinct values).
    chunk_bytes : int, optional
        Bytes read per piece (default :data:`CHUNK_BYTES`); pieces end at a line end
        (a longer line grows the piece).

    Returns
    -------
    ScanResult
        Rows read, value columns read as text, and the size and CRC-32 of the file
        (computed from the bytes read, for :class:`~perftest.importers.raw.RawTables`).

    Raises
    ------
    DataError
        Ragged rows (naming the line), a header without data rows.
    """
    names = column_names(layout)
    wanted = {*value_cols, *text_cols, *flag_cols}
    include = [n for n in names if n in wanted]
    types = {c: pa.float64() for c in value_cols}
    types.update({c: pa.dictionary(pa.int32(), pa.string()) for c in flag_cols})
    types.update({c: pa.string() for c in text_cols})
    as_text: list[str] = []
    rows = 0
    with open(layout.path, "rb") as fh, ThreadPoolExecutor(max_workers=1) as pool:
        reader = _Pieces(fh, layout.data_offset, int(chunk_bytes or CHUNK_BYTES))
        # pyarrow parses the next piece (without the GIL) while the sink copies this one;
        # the pieces alternate between two buffers, so the one being parsed stays intact
        parsing = None
        for piece in reader:
            queued = pool.submit(_parse_piece, layout, piece, include, types, as_text)
            del piece
            if parsing is not None:
                rows = _hand_over(parsing, rows, sink)
            parsing = queued
        if parsing is not None:
            rows = _hand_over(parsing, rows, sink)
    if rows == 0:
        raise DataError(
            f"{layout.name}: the file has a header (line {layout.header_line}) but no data "
            "rows. Export the run again with its samples.",
            file=layout.path,
        )
    text = [c for c in value_cols if c in as_text]
    return ScanResult(rows, text, reader.size, reader.crc32)


def _hand_over(parsing, rows: int, sink) -> int:
    table = parsing.result()
    if table.num_rows:
        sink(table, rows)
    return rows + table.num_rows


class _Pieces:
    """The data lines of an open file in pieces of about ``chunk`` bytes that end at a
    line end, as memoryviews of two buffers taken in turn (a piece must be done with
    before the next but one is asked for); keeps the size and CRC-32 of every byte of
    the file as it goes."""

    def __init__(self, fh, offset: int, chunk: int):
        self.fh = fh
        self.chunk = max(chunk, 16)
        head = fh.read(offset)
        self.size = len(head)
        self.crc32 = zlib.crc32(head)

    def __iter__(self):
        bufs = [bytearray(self.chunk), bytearray(self.chunk)]
        cur, have = 0, 0
        while True:
            buf = bufs[cur]
            if have == len(buf):  # one line longer than the piece: make room
                buf = bufs[cur] = buf + bytes(len(buf))
            view = memoryview(buf)
            got = self.fh.readinto(view[have:])
            end = have + got
            if got:
                self.size += got
                self.crc32 = zlib.crc32(view[have:end], self.crc32)
                cut = max(buf.rfind(b"\n", 0, end), buf.rfind(b"\r", 0, end)) + 1
            else:
                cut = end  # the rest of the file (a last line without line end)
            if cut:
                yield view[:cut]
            del view
            if not got:
                return
            if cut:  # the rest of the last line goes to the front of the other buffer
                cur = 1 - cur
                if len(bufs[cur]) < end - cut:
                    bufs[cur] = bytearray(end - cut)
                bufs[cur][: end - cut] = buf[cut:end]
            have = end - cut  # (no line end yet: keep filling this buffer)


def _parse_piece(layout, piece, include, types, as_text) -> pa.Table:
    names = column_names(layout)
    while True:
        opts = arrow_options(layout, include, types)
        source = pa.BufferReader(pa.py_buffer(piece))
        try:
            return pacsv.read_csv(source, *opts)
        except pa.ArrowInvalid as exc:
            msg = str(exc)
            m = _CONVERSION_ERROR.search(msg)
            if m is None:
                raise _parse_error(layout, msg) from None
            bad = names[int(m.group(1))]
            if types.get(bad) != pa.float64():  # text columns cannot fail; do not loop
                raise _parse_error(layout, msg) from None
            types[bad] = pa.string()
            as_text.append(bad)
        finally:
            source.close()


def _parse_error(layout: FileLayout, msg: str) -> DataError:
    """Turn a pyarrow parse error into a message that names the line."""
    n = len(layout.header)
    line_no = None
    got = None
    with open(layout.path, encoding=layout.encoding, errors="replace", newline="") as fh:
        reader = csv.reader(fh, delimiter=layout.sep, quotechar='"')
        for row in reader:
            if reader.line_num < layout.first_data_line:
                continue
            if not row:
                continue
            if len(row) != n:
                line_no, got = reader.line_num, len(row)
                break
    if line_no is not None:
        return DataError(
            f"{layout.where(line_no)}: the row has {got} fields but the header has {n}. "
            "Fix the row (a stray or missing separator?) or delete it.",
            file=layout.path,
            line=line_no,
        )
    return DataError(
        f"{layout.name}: the CSV reader stopped: {msg}. Check the file around the row shown.",
        file=layout.path,
    )


def lines_of_rows(layout: FileLayout, rows) -> np.ndarray:
    """File line numbers (1-based) of data rows (0-based indices into the table).

    One pass over the file in Python, stopping at the largest row asked for;
    only used on the slow paths (errors, text cells, duplicates).  Blank lines are
    skipped as pyarrow skips them.
    """
    rows = np.asarray(rows, dtype=np.int64)
    out = np.empty(rows.shape, dtype=np.int64)
    if rows.size == 0:
        return out
    order = np.argsort(rows, kind="stable")
    wanted = rows[order]
    j = 0
    row = -1
    with open(layout.path, encoding=layout.encoding, errors="replace", newline="") as fh:
        for line_no, line in enumerate(fh, start=1):
            if line_no < layout.first_data_line or not line.strip("\r\n"):
                continue
            row += 1
            while j < wanted.size and wanted[j] == row:
                out[order[j]] = line_no
                j += 1
            if j == wanted.size:
                break
    # rows past the end (should not happen) get the data-line estimate
    while j < wanted.size:
        out[order[j]] = layout.first_data_line + wanted[j]
        j += 1
    return out
