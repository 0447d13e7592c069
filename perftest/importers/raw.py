"""``Run.raw``: the run files' columns as written, read again from the file when asked for.

Keeping every cell of a large log as text beside its SI values would cost more memory
than the values themselves.  The import therefore records, per file, where the data
lines start, how they are split, which columns were read, the UTC stamp of every row
and a fingerprint of the file (size and CRC-32 of all its bytes).  The first access to
``run.raw[stem]`` reads those columns again, as text, and checks the fingerprint first:
a file that changed since the import raises :class:`~perftest.errors.DataError`
instead of showing other data.  The masked cells themselves never depend on this:
their raw text is stored in ``Run.exclusions`` at import.
"""

from __future__ import annotations

import zlib
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv

from perftest.errors import DataError
from perftest.importers.csvfile import FileLayout, arrow_options

__all__ = ["RawSource", "RawTables"]

_READ_BYTES = 1 << 22


@dataclass(frozen=True)
class RawSource:
    """How to read one run file's columns again, and the fingerprint it must match.

    Attributes
    ----------
    layout : FileLayout
        Path, encoding, separator, header and the byte offset of the data lines.
    columns : tuple of str
        Columns read at import (time, quality and value columns), in file order.
    times : DatetimeIndex
        UTC stamp of every data row as read (repeated stamps included).
    size : int
        File size [byte] at import.
    crc32 : int
        zlib CRC-32 of the whole file at import.
    origin : Origin or None
        For a workbook, Parquet file or database: the source the file was staged from
        (:mod:`perftest.importers.sources`); None for a CSV file.
    """

    layout: FileLayout
    columns: tuple[str, ...]
    times: pd.DatetimeIndex
    size: int
    crc32: int
    origin: object = None  # sources.Origin of a workbook, Parquet file or database

    def read(self) -> pd.DataFrame:
        """The columns as text (pandas ``str``; blank cells missing), indexed by ``times``.

        Raises
        ------
        DataError
            If the file is gone, or its size or CRC-32 differ from the import.
        """
        path = self.layout.path
        try:
            data = path.read_bytes()
        except OSError as exc:
            raise DataError(
                f"{path}: Run.raw reads the run file again on first use, but it cannot be "
                f"read any more ({exc.strerror or exc}). Restore the file, or import it again.",
                file=path,
            ) from None
        if len(data) != self.size:
            raise self._changed(f"its size is {len(data)} bytes, not {self.size}")
        crc = 0
        with memoryview(data) as view:
            for k in range(0, len(data), _READ_BYTES):
                crc = zlib.crc32(view[k : k + _READ_BYTES], crc)
        if crc != self.crc32:
            raise self._changed(f"its CRC-32 is {crc:08x}, not {self.crc32:08x}")
        types = dict.fromkeys(self.columns, pa.string())
        opts = arrow_options(self.layout, list(self.columns), types, blank_is_null=True)
        body = pa.py_buffer(data)[self.layout.data_offset :]
        table = pacsv.read_csv(pa.BufferReader(body), *opts)
        del data, body
        if table.num_rows != len(self.times):  # pragma: no cover - guarded by the checksum
            raise self._changed(f"it holds {table.num_rows} rows, not {len(self.times)}")
        frame = table.to_pandas()
        frame.index = self.times
        return frame

    def _changed(self, what: str) -> DataError:
        path = self.layout.path
        return DataError(
            f"{path}: the run file changed since it was imported ({what}), so Run.raw cannot "
            "show the cells that were imported. Import the file again (read_run) or restore it.",
            file=path,
        )


class RawTables(Mapping):
    """Read-only mapping file stem -> :class:`~pandas.DataFrame` of the columns as written.

    Each table is read from its file on first access (see :class:`RawSource`) and kept;
    every access returns a shallow copy, so changing it leaves the run untouched.
    """

    def __init__(self, sources: Mapping[str, RawSource]):
        self._sources = dict(sources)
        self._read: dict[str, pd.DataFrame] = {}

    def __getitem__(self, stem: str) -> pd.DataFrame:
        if stem not in self._sources:
            raise KeyError(stem)
        frame = self._read.get(stem)
        if frame is None:
            frame = self._read[stem] = self._sources[stem].read()
        return frame.copy(deep=False)

    def __iter__(self) -> Iterator[str]:
        return iter(self._sources)

    def __len__(self) -> int:
        return len(self._sources)

    def source(self, stem: str) -> RawSource:
        """Where and how ``stem`` is read again."""
        return self._sources[stem]

    def __repr__(self) -> str:
        state = ", ".join(
            f"{k!r}: {'read' if k in self._read else 'in ' + self._sources[k].layout.name}"
            for k in self._sources
        )
        return f"RawTables({{{state}}})"
