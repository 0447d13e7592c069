"""Truth table of malformed run files and read_run arguments.

Each row is a run file (bytes, so that encodings and line ends are exact), the
arguments of ``read_run``, and the error class and message fragment it must give.
The fragment names the place (file, line, column, tag or parameter): a performance
engineer must be able to find the bad cell from the message alone (perftest's error
policy, DEVELOPERS.md).  A second table holds files with a few bad cells inside good
data: they must be read, with each bad cell masked and recorded, not refused.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from perftest.errors import DataError, InputError, PerftestError, UnitError
from perftest.importers import read_run

from .conftest import PLANT, RUN, write_bytes, write_text

HEAD = b"time,TT-1,PT-1,FT-1\n"
ROW1 = b"2031-05-04 10:00:00,150.1,10.02,50.1\n"
ROW2 = b"2031-05-04 10:01:00,150.3,10.01,50.0\n"
ROW3 = b"2031-05-04 10:02:00,150.2,10.03,49.9\n"
GOOD = HEAD + ROW1 + ROW2 + ROW3

# (file bytes, read_run keyword arguments, use the plant file?, error class, fragment)
BAD_FILES = [
    pytest.param(b"", {}, False, DataError, r"run\.csv.*empty", id="empty-file"),
    pytest.param(b"\n\n\n", {}, False, DataError, r"run\.csv", id="blank-lines-only"),
    pytest.param(HEAD, {}, False, DataError, r"run\.csv", id="header-only"),
    pytest.param(
        b"\x00\x01\x02\x03\xff\xfe\x00garbage\x00", {}, False, DataError, r"run\.csv", id="binary"
    ),
    pytest.param(
        "time,TT-1\n2031-05-04 10:00:00,1.0\n".encode("utf-16"),
        {},
        False,
        DataError,
        r"run\.csv: the file is UTF-16 text.*UTF-8",
        id="utf16-export",
    ),
    pytest.param(
        b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR", {}, False, DataError, r"run\.csv", id="png-bytes"
    ),
    pytest.param(
        b"TT-1,PT-1\n150.1,10.0\n150.2,10.1\n",
        {},
        False,
        DataError,
        r"run\.csv.*time",
        id="no-time-column",
    ),
    pytest.param(
        HEAD + ROW1 + b"yesterday noon,150.3,10.01,50.0\n" + ROW3,
        {},
        False,
        DataError,
        r"run\.csv, line 3, column 'time'",
        id="time-text-in-middle",
    ),
    pytest.param(
        HEAD + ROW2 + ROW1 + ROW3,
        {},
        False,
        DataError,
        r"run\.csv, line 3.*earlier than.*line 2",
        id="time-backwards",
    ),
    pytest.param(
        HEAD + b"2031-02-30 10:00:00,150.1,10.02,50.1\n" + ROW2,
        {},
        False,
        DataError,
        r"run\.csv, line 2, column 'time'",
        id="impossible-date",
    ),
    pytest.param(
        b"time,TT-1,Note\n2031-05-04 10:00:00,150.1,ok\n2031-05-04 10:01:00,150.2,fine\n",
        {},
        False,
        DataError,
        r"run\.csv, column 'Note'.*text and no numbers",
        id="text-column",
    ),
    pytest.param(
        b"time,TT-1,PT-1\nunits,degQ,bar\n2031-05-04 10:00:00,150.1,1.0\n"
        b"2031-05-04 10:01:00,150.2,1.0\n",
        {},
        False,
        UnitError,
        r"run\.csv, line 2, column 'TT-1'.*degQ",
        id="unknown-unit-in-units-row",
    ),
    pytest.param(
        b"time,TT-1\nunits,degF\n2031-05-04 10:00:00,150.1\n2031-05-04 10:01:00,150.2\n",
        {},
        True,
        DataError,
        r"run\.csv, column 'TT-1'.*'degF'.*'degC'",
        id="units-row-disagrees-with-plant",
    ),
    pytest.param(
        b"time,TT-1,PT-1\n2031-05-04 10:00:00,150.1,10.0\n2031-05-04 10:01:00,150.2,10.1\n",
        {},
        True,
        DataError,
        r"Tag 'FT-1'.*no column 'FT-1'",
        id="plant-tag-column-missing",
    ),
    pytest.param(
        HEAD + ROW1 + b"2031-05-04 10:01:00,150.3,-3.5,50.0\n" + ROW3,
        {},
        True,
        DataError,
        r"run\.csv, line 3, column 'PT-1'",
        id="negative-absolute-pressure",
    ),
    pytest.param(
        HEAD + ROW1 + b"2031-05-04 10:01:00,-300.0,10.01,50.0\n" + ROW3,
        {},
        True,
        DataError,
        r"run\.csv, line 3, column 'TT-1'",
        id="below-absolute-zero",
    ),
    pytest.param(
        b"time,TT-1,TT-1\n2031-05-04 10:00:00,150.1,150.2\n2031-05-04 10:01:00,150.2,150.3\n",
        {},
        False,
        DataError,
        r"run\.csv.*'TT-1'",
        id="duplicated-header",
    ),
    pytest.param(
        HEAD + ROW1 + b"2031-05-04 10:01:00,150.3,10.01,50.0,99,98\n" + ROW3,
        {},
        False,
        DataError,
        r"run\.csv.*line 3",
        id="ragged-row-too-long",
    ),
    pytest.param(
        GOOD,
        {"time_column": "clock"},
        False,
        DataError,
        r"run\.csv, line 1: no column 'clock'",
        id="time-column-not-in-file",
    ),
    pytest.param(
        b"time,TT-1\n2031-03-30 02:30:00,150.1\n2031-03-30 03:30:00,150.2\n",
        {"timezone": "Europe/Berlin"},
        False,
        DataError,
        r"run\.csv, line 2, column 'time'.*does not exist",
        id="local-time-in-spring-gap",
    ),
    pytest.param(
        b"time,TT-1\nunits,degC\nyyyy-mm-dd,\n2031-05-04 10:00:00,150.1\n",
        {},
        False,
        DataError,
        r"run\.csv, line 3, column 'time'",
        id="second-description-row",
    ),
    pytest.param(
        b"time,PT-1\nunits,barg\n2031-05-04 10:00:00,1.0\n2031-05-04 10:01:00,1.1\n",
        {},
        False,
        DataError,
        r"PT-1.*atmospheric",
        id="gauge-without-atmosphere",
    ),
]


@pytest.mark.parametrize("content, kwargs, with_plant, error, fragment", BAD_FILES)
def test_bad_run_file(tmp_path, content, kwargs, with_plant, error, fragment):
    path = write_bytes(tmp_path, "run.csv", content)
    plant = write_text(tmp_path, "plant.toml", PLANT) if with_plant else None
    with pytest.raises(error, match=fragment) as info:
        read_run(path, plant, **kwargs)
    # one line in the CLI: the message must say where, whatever its class
    assert str(info.value).strip()


# (read_run keyword arguments, error class, fragment): the run file is good
BAD_ARGUMENTS = [
    pytest.param({"sep": "ab"}, InputError, r"'sep' parameter of read_run", id="sep-two-chars"),
    pytest.param({"sep": "\n"}, InputError, r"'sep' parameter of read_run", id="sep-newline"),
    pytest.param({"sep": 5}, InputError, r"'sep' parameter of read_run", id="sep-number"),
    pytest.param({"decimal": ";"}, InputError, r"'decimal' parameter", id="decimal-semicolon"),
    pytest.param({"decimal": ""}, InputError, r"'decimal' parameter", id="decimal-empty"),
    pytest.param({"timezone": "Mars/Base"}, InputError, r"Mars/Base", id="unknown-zone"),
    pytest.param({"timezone": 3}, InputError, r"timezone", id="zone-number"),
    pytest.param({"every": "fast"}, InputError, r"'every' parameter", id="every-text"),
    pytest.param({"every": -60}, InputError, r"'every' parameter", id="every-negative"),
    pytest.param({"every": 0}, InputError, r"'every' parameter", id="every-zero"),
    pytest.param({"units": "degC"}, InputError, r"'units' parameter", id="units-not-mapping"),
    pytest.param({"units": {"TT-1": "furlong"}}, UnitError, r"furlong", id="units-unknown"),
    pytest.param({"units": {"TT-1": 5}}, InputError, r"'units' parameter", id="units-value-number"),
    pytest.param({"sentinels": object()}, InputError, r"'sentinels'", id="sentinels-object"),
    pytest.param({"time_column": 5}, InputError, r"time_column", id="time-column-number"),
]


@pytest.mark.parametrize("kwargs, error, fragment", BAD_ARGUMENTS)
def test_bad_read_run_arguments(tmp_path, kwargs, error, fragment):
    path = write_bytes(tmp_path, "run.csv", GOOD)
    with pytest.raises(error, match=fragment):
        read_run(path, **kwargs)


def test_no_files(tmp_path):
    with pytest.raises(InputError, match="at least one CSV file"):
        read_run([])


def test_file_does_not_exist(tmp_path):
    with pytest.raises(DataError, match=r"nothere\.csv: the run file does not exist"):
        read_run(tmp_path / "nothere.csv")


def test_directory_instead_of_file(tmp_path):
    (tmp_path / "folder.csv").mkdir()
    with pytest.raises(PerftestError, match=r"folder\.csv"):
        read_run(tmp_path / "folder.csv")


def test_plant_of_wrong_type(tmp_path):
    path = write_bytes(tmp_path, "run.csv", GOOD)
    with pytest.raises(InputError, match="'plant' parameter of read_run"):
        read_run(path, 42)


def test_two_files_with_one_name(tmp_path):
    a = tmp_path / "a"
    b = tmp_path / "b"
    a.mkdir()
    b.mkdir()
    write_bytes(a, "run.csv", GOOD)
    write_bytes(b, "run.csv", GOOD)
    with pytest.raises(DataError, match=r"share the name 'run'"):
        read_run([a / "run.csv", b / "run.csv"])


def test_files_that_do_not_overlap(tmp_path):
    write_bytes(tmp_path, "h.csv", GOOD)
    later = GOOD.replace(b"2031-05-04", b"2031-06-04").replace(b"TT-1,PT-1,FT-1", b"TA,PA,FA")
    write_bytes(tmp_path, "l.csv", later)
    with pytest.raises(DataError, match="do not overlap in time"):
        read_run([tmp_path / "h.csv", tmp_path / "l.csv"])


# --- a few bad samples inside a good file: masked and recorded, not fatal -------------

# (bad cell text in column TT-1 on data row 2, reason fragment expected in exclusions)
MASKED = [
    pytest.param("", "blank cell", id="blank"),
    pytest.param("n/a", "n/a", id="text-na"),
    pytest.param("Bad", "Bad", id="text-bad"),
    pytest.param("#VALUE!", "#VALUE!", id="spreadsheet-error"),
    pytest.param("-9999", "sentinel value -9999", id="sentinel-9999"),
    pytest.param("NaN", "NaN", id="nan-literal"),
    pytest.param("inf", "infinite", id="infinite"),
    pytest.param("1.2.3", "1.2.3", id="two-decimal-points"),
    pytest.param("=1+1", "=1+1", id="formula-text"),
]


@pytest.mark.parametrize("cell, reason", MASKED)
def test_bad_cell_is_masked_and_recorded(tmp_path, cell, reason):
    rows = RUN.splitlines()
    parts = rows[2].split(",")
    parts[1] = cell
    rows[2] = ",".join(parts)
    path = write_text(tmp_path, "run.csv", "\n".join(rows) + "\n")
    run = read_run(path, write_text(tmp_path, "plant.toml", PLANT))
    # nothing lost: every row is kept, the bad cell is NaN and masked with its reason
    assert len(run.data) == 4
    assert np.isnan(run.data["TT-1"].iloc[1])
    assert bool(run.mask["TT-1"].iloc[1])
    assert run.mask.to_numpy().sum() == 1
    ex = run.exclusions
    assert list(ex["tag"]) == ["TT-1"]
    assert reason in str(ex["reason"].iloc[0])
    # the other samples of the tag are untouched: 150.1, 150.2, 150.0 degC in K
    # (273.15 K offset exact by definition of the Celsius scale, SI Brochure 2.3.1)
    others = run.data["TT-1"].drop(run.data.index[1]).to_numpy()
    assert np.allclose(others, np.array([150.1, 150.2, 150.0]) + 273.15, rtol=0, atol=1e-9)


def test_quality_flag_masks_and_records(tmp_path):
    text = (
        "time,TT-1,TT-1 quality,PT-1,FT-1\n"
        "2031-05-04 10:00:00,150.1,good,10.02,50.1\n"
        "2031-05-04 10:01:00,150.3,bad,10.01,50.0\n"
        "2031-05-04 10:02:00,150.2,good,10.03,49.9\n"
    )
    run = read_run(write_text(tmp_path, "run.csv", text), write_text(tmp_path, "p.toml", PLANT))
    ex = run.exclusions
    assert list(ex["tag"]) == ["TT-1"]
    assert re.search(r"quality flag 'bad'", ex["reason"].iloc[0])
    assert np.isnan(run.data["TT-1"].iloc[1])


def test_repeated_stamp_keeps_first_and_records(tmp_path):
    text = RUN.splitlines()
    text.insert(3, text[2].replace("150.3", "151.9"))
    with pytest.warns(Warning, match="repeat an earlier time stamp"):
        run = read_run(
            write_text(tmp_path, "run.csv", "\n".join(text) + "\n"),
            write_text(tmp_path, "p.toml", PLANT),
        )
    assert len(run.data) == 4
    # the first row of the stamp is kept: 150.3 degC, not the repeat's 151.9 degC
    assert run.data["TT-1"].iloc[1] == pytest.approx(150.3 + 273.15, abs=1e-9)
    reasons = run.exclusions["reason"].astype(str)
    assert reasons.str.startswith("duplicate time stamp").sum() == 3  # one per tag


def test_unnamed_last_column_is_logged_not_silently_dropped(tmp_path):
    # a trailing separator on the header line leaves the last column without a name;
    # it is not read, and the run's log says so
    path = write_bytes(tmp_path, "run.csv", b"time,TT-1,\n2031-05-04 10:00:00,1.0,7\n")
    run = read_run(path)
    assert list(run.data.columns) == ["TT-1"]
    assert any("column 3) has no name in the header and was not read" in s for s in run.log)


# --- issue 17: tables instead of paths, thousands separators, wide headers, text cells


@pytest.mark.parametrize("kind", ["dataframe", "open-file"])
def test_table_or_open_file_instead_of_paths(tmp_path, kind):
    import pandas as pd

    path = write_bytes(tmp_path, "run.csv", GOOD)
    if kind == "dataframe":
        with pytest.raises(InputError, match=r"'paths' parameter of read_run.*Got a DataFrame"
                           r".*perftest\.Run\.from_frame"):  # fmt: skip
            read_run(pd.read_csv(path))
    else:
        with open(path, encoding="utf-8") as fh:
            with pytest.raises(InputError, match=r"Got an open file \(this one's path is "
                               + re.escape(repr(str(path)))):  # fmt: skip
                read_run(fh)


# 1000.4 t/h etc.: the flow column of a log whose export groups thousands.  Values in
# t/h; 1 t/h = 1/3.6 kg/s exactly (definition of the tonne and the hour).
THOUSANDS = [
    pytest.param(
        b"time,TT-1,PT-1,FT-1\n2031-05-04 10:00:00,150.1,10.02,999.5\n"
        b'2031-05-04 10:01:00,150.3,10.01,"1,000.4"\n'
        b'2031-05-04 10:02:00,150.2,10.03,"1,000"\n',
        [999.5, 1000.4, 1000.0],
        id="comma-groups-decimal-point",
    ),
    pytest.param(
        b"time;TT-1;PT-1;FT-1\n2031-05-04 10:00:00;150,1;10,02;999,5\n"
        b"2031-05-04 10:01:00;150,3;10,01;1.000,4\n"
        b"2031-05-04 10:02:00;150,2;10,03;1.001,5\n",
        [999.5, 1000.4, 1001.5],
        id="point-groups-decimal-comma",
    ),
]


@pytest.mark.parametrize("content, flows", THOUSANDS)
def test_thousands_separators_are_accepted(tmp_path, content, flows):
    run = read_run(write_bytes(tmp_path, "run.csv", content),
                   write_text(tmp_path, "plant.toml", PLANT))  # fmt: skip
    assert not run.mask["FT-1"].any()
    # exact decimal inputs, one division: a few ulp
    np.testing.assert_allclose(run.data["FT-1"], np.array(flows) / 3.6, rtol=1e-14)
    assert any("thousands separators read as numbers" in line for line in run.log)


def test_lone_comma_groups_are_masked_when_the_convention_is_unclear(tmp_path):
    # "1,500" alone could be 1.5 with a decimal comma: not read, masked and recorded
    content = GOOD.replace(b",49.9\n", b',"1,500"\n')
    run = read_run(write_bytes(tmp_path, "run.csv", content),
                   write_text(tmp_path, "plant.toml", PLANT))  # fmt: skip
    assert bool(run.mask["FT-1"].iloc[2])
    assert "1,500" in str(run.exclusions["reason"].iloc[0])


def test_header_wider_than_64kB_is_accepted(tmp_path):
    extra = [f"SPARE-COLUMN-WITH-A-LONG-NAME-{i:05d}" for i in range(3000)]  # ~110 kB
    head = ",".join(["time", "TT-1", "PT-1", "FT-1", *extra]) + "\n"
    assert len(head) > 1 << 16
    rows = "".join(f"2031-05-04 10:0{i}:00,150.{i},10.02,50.1," + ",".join(["1"] * 3000) + "\n"
                   for i in range(4))  # fmt: skip
    run = read_run(write_text(tmp_path, "run.csv", head + rows),
                   write_text(tmp_path, "plant.toml", PLANT))  # fmt: skip
    assert len(run.data) == 4
    # 150.3 degC in K (273.15 K offset exact, SI Brochure 2.3.1)
    assert run.data["TT-1"].iloc[3] == pytest.approx(423.45, abs=1e-9)


def test_tag_losing_samples_to_text_cells_is_logged(tmp_path):
    from perftest.errors import DataQualityWarning

    rows = ["time,TT-1,PT-1,FT-1"] + [
        f"2031-05-04 10:{i:02d}:00,150.1,10.02,{'50,1' if i % 3 == 0 else '50.1'}"
        for i in range(60)
    ]
    # unquoted "50,1" in a comma file splits the row: quote it as an export would
    rows = [r.replace("50,1", '"50,1"') for r in rows]
    with pytest.warns(DataQualityWarning, match=r"run\.csv, column 'FT-1': tag 'FT-1' lost "
                      r"20 of 60 samples \(33 %, more than 1 %\) to text cells"):  # fmt: skip
        run = read_run(write_text(tmp_path, "run.csv", "\n".join(rows) + "\n"),
                       write_text(tmp_path, "plant.toml", PLANT))  # fmt: skip
    assert int(run.mask["FT-1"].sum()) == 20
    assert any("lost 20 of 60 samples" in line for line in run.log)
