"""Write the Brackenfold run files again as a workbook, a Parquet file and a database.

The same samples, kept where plants keep them: ``historian.xlsx`` (the historian CSV as
an exported workbook, sheet "Historian", with its units row and Excel date cells),
``logger.parquet`` (the portable logger's samples, numbers as floats, stamps as
timestamps, units in the column metadata) and ``historian.db`` (an SQLite historian
with both sources in the usual long layout: ``samples(source, time, tag, value,
quality)``). Text and blank cells are kept as they are written (text as text, blank as
NULL), so the three routes mask what the CSV files mask.

Run ``python sample_data/brackenfold/convert.py`` after ``generate.py``; the output is
deterministic apart from the workbook's zip time stamps (fixed here too).
"""

from __future__ import annotations

import csv
import datetime as dt
import sqlite3
from pathlib import Path

HERE = Path(__file__).resolve().parent
#: Units of the logger's columns (the CSV has no units row; the plant file gives them).
LOGGER_UNITS = {"TT-181": "degC", "TT-182": "degC", "JT-101B": "kW"}


def _rows(path: Path, sep: str) -> list[list[str]]:
    with path.open(newline="", encoding="utf-8") as fh:
        return list(csv.reader(fh, delimiter=sep))


def _number(text: str, decimal: str = "."):
    t = text.strip()
    if decimal == ",":
        t = t.replace(",", ".")
    try:
        return float(t)
    except ValueError:
        return None


def _time(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text.strip())


def write_workbook(target: Path) -> None:
    import openpyxl

    rows = _rows(HERE / "historian.csv", ",")
    book = openpyxl.Workbook()
    ws = book.active
    ws.title = "Historian"
    ws.append(rows[0])
    ws.append(rows[1])  # units row
    for row in rows[2:]:
        cells = [_time(row[0])]
        for cell in row[1:]:
            v = _number(cell)
            cells.append(v if v is not None else (cell if cell.strip() else None))
        ws.append(cells)
    book.properties.created = dt.datetime(2026, 5, 14, 13, 0, 0)
    book.properties.modified = dt.datetime(2026, 5, 14, 13, 0, 0)
    book.save(target)


def write_parquet(target: Path) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    rows = _rows(HERE / "logger.csv", ";")
    header, body = rows[0], rows[1:]
    arrays = [pa.array([_time(r[0]) for r in body], type=pa.timestamp("s"))]
    fields = [pa.field(header[0], pa.timestamp("s"))]
    for j, name in enumerate(header[1:], start=1):
        arrays.append(pa.array([_number(r[j], ",") for r in body], type=pa.float64()))
        fields.append(pa.field(name, pa.float64(), metadata={"unit": LOGGER_UNITS[name]}))
    pq.write_table(pa.Table.from_arrays(arrays, schema=pa.schema(fields)), target)


def write_database(target: Path) -> None:
    target.unlink(missing_ok=True)
    con = sqlite3.connect(target)
    con.execute("CREATE TABLE samples (source TEXT, time TEXT, tag TEXT, value REAL, quality TEXT)")
    for name, sep, decimal, units_row in (
        ("historian", ",", ".", True),
        ("logger", ";", ",", False),
    ):
        rows = _rows(HERE / f"{name}.csv", sep)
        header = rows[0]
        body = rows[2:] if units_row else rows[1:]
        out = []
        for r in body:
            for j, tag in enumerate(header[1:], start=1):
                cell = r[j] if j < len(r) else ""
                v = _number(cell, decimal)
                value = v if v is not None else (cell if cell.strip() else None)
                out.append((name, r[0].strip(), tag, value, "good"))
        con.executemany("INSERT INTO samples VALUES (?, ?, ?, ?, ?)", out)
    con.execute("CREATE INDEX samples_time ON samples (source, time)")
    con.commit()
    con.execute("VACUUM")
    con.close()


def main() -> None:
    write_workbook(HERE / "historian.xlsx")
    write_parquet(HERE / "logger.parquet")
    write_database(HERE / "historian.db")


if __name__ == "__main__":
    main()
