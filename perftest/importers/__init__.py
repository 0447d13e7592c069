"""Run-file importers: CSV logs, Excel workbooks, Parquet files and database tables into a
:class:`~perftest.run.core.Run`.

See docs/run-files.md for the accepted files, the alignment rule and the masks.
"""

from __future__ import annotations

from perftest.importers.reader import read_parts, read_run, read_sql

__all__ = ["read_run", "read_parts", "read_sql"]
