"""Run files read a day at a time for :func:`perftest.reconcile_many`.

A year of one-minute logs is half a million lines per file.  Rather than reading
it whole, :func:`index_files` makes one streaming pass over each file and notes,
for every calendar day as written in the file (the date text of its lines), the
byte range, the first line number and a hash of the lines.  A *piece* of the run
(the data one chunk of windows needs, a plant day plus the length of one window)
is then read by copying the header and the needed days into a temporary file of
the same name and passing it to :func:`perftest.read_run`, so every rule of the
importer applies unchanged.  Memory holds one piece at a time, whatever the
length of the files.

Error messages of a piece name the original file and its original line numbers.
"""

from __future__ import annotations

import dataclasses
import hashlib
import re
import shutil
import tempfile
import warnings
from pathlib import Path

import pandas as pd

from perftest.errors import DataError, InputError, PerftestError

__all__ = ["FileIndex", "Piece", "index_files", "read_piece"]

# The date text of a line: ISO (2026-05-14) or day/month forms (14.05.2026,
# 05/14/26).  Lines are grouped by equal text only, so the order of day and month
# does not matter.
_DATE = re.compile(rb"\d{4}-\d{2}-\d{2}|\d{1,2}[./]\d{1,2}[./]\d{2,4}")
# The header block (preamble, column names, units row) ends before the first line
# with a date after the last dateless line among the first lines of the file.
_HEADER_LINES_MAX = 50


@dataclasses.dataclass(frozen=True)
class _Day:
    text: bytes  # the date text
    begin: int  # byte offset of its first line
    end: int  # byte offset after its last line
    first_line: int  # line number (1-based) of its first line
    digest: str  # sha256 of its lines


@dataclasses.dataclass(frozen=True)
class FileIndex:
    """Where each day of one run file lies.

    Attributes
    ----------
    path : Path
    header : bytes
        The lines before the first data line (preamble, names, units row).
    header_lines : int
    days : tuple of _Day
        In file order.
    starts : tuple of pandas.Timestamp
        UTC time of the first line of each day (as the importer reads it).
    last : pandas.Timestamp
        UTC time of the last line.
    """

    path: Path
    header: bytes
    header_lines: int
    days: tuple
    starts: tuple
    last: pd.Timestamp

    def select(self, begin: pd.Timestamp, end: pd.Timestamp) -> tuple[int, int] | None:
        """Indices ``(i, j)`` of the days holding samples in ``[begin, end)``, or None."""
        chosen = [
            i
            for i, t in enumerate(self.starts)
            if t < end and (self.starts[i + 1] if i + 1 < len(self.starts) else self.last) >= begin
        ]
        return (chosen[0], chosen[-1] + 1) if chosen else None


@dataclasses.dataclass(frozen=True)
class Piece:
    """The byte range of each file that one chunk of windows needs.

    Attributes
    ----------
    parts : tuple of (Path, bytes, int, int, int)
        Per file: path, header, byte begin, byte end, line-number offset of the
        data lines (original line = line in the piece + offset).
    digest : str
        Hash of the header and lines of every file of the piece.
    """

    parts: tuple
    digest: str


def _scan(path: Path) -> tuple[bytes, int, list]:
    head: list[bytes] = []
    with open(path, "rb") as f:
        for _ in range(_HEADER_LINES_MAX):
            line = f.readline()
            if not line:
                break
            head.append(line)
    dateless = [i for i, line in enumerate(head) if _DATE.search(line) is None and line.strip()]
    n_header = (dateless[-1] + 1) if dateless else 0
    header = b"".join(head[:n_header])
    days = []
    with open(path, "rb") as f:
        pos = 0
        for _ in range(n_header):
            pos += len(f.readline())
        number = n_header
        key = None
        begin = first = 0
        h = None
        for line in f:
            number += 1
            m = _DATE.search(line)
            text = m.group(0) if m else key
            if text != key:
                if key is not None:
                    days.append(_Day(key, begin, pos, first, h.hexdigest()))
                key, begin, first, h = text, pos, number, hashlib.sha256()
            h.update(line)
            pos += len(line)
        if key is not None:
            days.append(_Day(key, begin, pos, first, h.hexdigest()))
    return header, n_header, days


_CLOCK = re.compile(rb"\s*\d{1,2}:\d{2}")


def _time_text(line: bytes) -> bytes:
    """The time stamp text of a data line: the field holding the date, joined with
    the next field when that holds the clock time (separate date and time columns)."""
    fields = re.split(rb"[,;\t]", line.rstrip(b"\r\n"))
    for i, f in enumerate(fields):
        if _DATE.search(f):
            text = f.strip().strip(b'"')
            if not _CLOCK.search(f) and i + 1 < len(fields) and _CLOCK.match(fields[i + 1]):
                text += b" " + fields[i + 1].strip().strip(b'"')
            return text
    return b""


def _line_at(path: Path, offset: int) -> bytes:
    with open(path, "rb") as f:
        f.seek(offset)
        return f.readline()


def _last_line(path: Path, day: _Day) -> tuple[bytes, bool]:
    """The last line of the file and whether it is also the first line of its day."""
    with open(path, "rb") as f:
        f.seek(max(day.begin, day.end - 65536))
        tail = f.read(day.end - max(day.begin, day.end - 65536))
    lines = [x for x in tail.splitlines(keepends=True) if x.strip()]
    last = lines[-1] if lines else b""
    return last, day.end - len(last) <= day.begin


def _rewrite(exc: PerftestError, tmp: Path, offsets: dict) -> PerftestError:
    """``exc`` with the temporary folder removed and line numbers of the original file."""
    msg = str(exc).replace(str(tmp) + "/", "").replace(str(tmp), "")

    def fix(m):
        name = m.group(1)
        off = offsets.get(name)
        if off is None:
            return m.group(0)
        header, shift = off
        line = int(m.group(2))
        return f"{name}, line {line + shift if line > header else line}"

    names = "|".join(re.escape(n) for n in offsets)
    if names:
        msg = re.sub(rf"({names}), line (\d+)", fix, msg)
    fields = {k: getattr(exc, k, None) for k in ("column", "tag", "key", "parameter")}
    line = getattr(exc, "line", None)
    file = getattr(exc, "file", None)
    if file is not None and Path(file).parent == tmp:
        name = Path(file).name
        if name in offsets and line is not None and line > offsets[name][0]:
            line += offsets[name][1]
        file = name
    try:
        new = type(exc)(msg, file=file, line=line, **fields)
    except TypeError:  # a subclass with a constructor of its own: keep it, text only
        exc.message = msg
        exc.args = (msg,)
        return exc
    return new


def _read(files, plant, read_kw, offsets_of=None):
    """``read_run`` on temporary copies; warnings are returned, not issued."""
    from perftest.importers import read_run

    tmp = Path(tempfile.mkdtemp(prefix="perftest-piece-"))
    offsets = {}
    try:
        paths = []
        for path, content, header_lines, shift in files:
            target = tmp / Path(path).name
            if target.exists():
                raise InputError(
                    f"Two run files share the name {Path(path).name!r}; reconcile_many reads "
                    "run files a day at a time and needs distinct file names. Rename one.",
                    parameter="run",
                )
            target.write_bytes(content)
            offsets[Path(path).name] = (header_lines, shift)
            paths.append(target)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                run = read_run(paths, plant, **read_kw)
            except PerftestError as exc:
                raise _rewrite(exc, tmp, offsets) from None
        notes = [f"{w.category.__name__}: {w.message}" for w in caught]
        notes = [n.replace(str(tmp) + "/", "") for n in notes]
        return run, notes
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def index_files(paths, plant, read_kw: dict) -> list[FileIndex]:
    """Index run files by day (one streaming pass each; see the module notes).

    Parameters
    ----------
    paths : list of path
        The files of one run (read together, as by :func:`perftest.read_run`).
    plant : Plant
    read_kw : dict
        Extra keywords of :func:`perftest.read_run`.

    Returns
    -------
    list of FileIndex

    Raises
    ------
    DataError
        A file is missing, empty, or holds no dated line.
    """
    out = []
    for p in paths:
        path = Path(p)
        if not path.is_file():
            raise DataError(f"{path}: run file not found.", file=path)
        header, n_header, days = _scan(path)
        if not days:
            raise DataError(
                f"{path}: no line with a date was found; reconcile_many reads run files a day "
                "at a time by the date written on each line.",
                file=path,
            )
        last, last_is_first = _last_line(path, days[-1])
        lines = [_line_at(path, d.begin) for d in days]
        if not last_is_first:
            lines.append(last)
        # one line per day (and the last line): the importer's own reading of the
        # stamps, from a file of the time texts alone (the plant's tags may come from
        # other files, so the probe is read without the plant, in its time zone).
        zone = getattr(getattr(plant, "site", None), "timezone", None) or "UTC"
        probe = b"time,n\n" + b"".join(_time_text(line) + b",0\n" for line in lines)
        probe_kw = {"timezone": read_kw.get("timezone") or zone, "sep": ","}
        run, _ = _read([(path, probe, 1, 0)], None, probe_kw)
        stamps = run.data.index
        if len(stamps) != len(days) + (0 if last_is_first else 1):
            raise DataError(
                f"{path}: the first lines of its days do not read as distinct, increasing "
                "time stamps; reconcile_many needs a file in time order.",
                file=path,
            )
        starts = tuple(stamps[: len(days)])
        out.append(FileIndex(path, header, n_header, tuple(days), starts, stamps[-1]))
    return out


def piece(indexes: list[FileIndex], begin: pd.Timestamp, end: pd.Timestamp) -> Piece | None:
    """The days of every file that hold samples in ``[begin, end)``; None if none do."""
    parts = []
    h = hashlib.sha256()
    for ix in indexes:
        sel = ix.select(begin, end)
        if sel is None:
            continue
        i, j = sel
        first = ix.days[i]
        shift = first.first_line - ix.header_lines - 1
        parts.append((ix.path, ix.header, first.begin, ix.days[j - 1].end, ix.header_lines, shift))
        h.update(hashlib.sha256(ix.header).digest())
        for d in ix.days[i:j]:
            h.update(d.digest.encode())
    if not parts:
        return None
    return Piece(tuple(parts), h.hexdigest())


def read_piece(pc: Piece, plant, read_kw: dict):
    """Read one piece into a Run; returns ``(run, notes)`` (notes: importer warnings)."""
    files = []
    for path, header, b0, b1, header_lines, shift in pc.parts:
        with open(path, "rb") as f:
            f.seek(b0)
            body = f.read(b1 - b0)
        files.append((path, header + body, header_lines, shift))
    return _read(files, plant, read_kw)


def first_and_last(indexes: list[FileIndex]) -> tuple[pd.Timestamp, pd.Timestamp]:
    """UTC time of the earliest and the latest line over the files."""
    return min(ix.starts[0] for ix in indexes), max(ix.last for ix in indexes)


def digest_of(indexes: list[FileIndex]) -> str:
    """Hash of every file's header and days (for the job's fingerprint)."""
    h = hashlib.sha256()
    for ix in indexes:
        h.update(hashlib.sha256(ix.header).digest())
        for d in ix.days:
            h.update(d.digest.encode())
    return h.hexdigest()
