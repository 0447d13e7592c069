"""Tests of perftest.importers: run CSV files into a Run.

Outside references used here:
* SI Brochure, 9th edition (BIPM 2019): T/K = t/degC + 273.15 (2.3.1); 1 bar = 1e5 Pa,
  1 t = 1000 kg, 1 h = 3600 s (Table 8); prefixes k = 1e3, M = 1e6 (Table 7).
* NIST SP 811 (2008), Appendix B.8: 1 psi = 6.894 757 E+03 Pa (from memory; the test
  uses the exact definition behind it); B.9: T/K = (t/degF + 459.67) / 1.8 (from memory).
* Python's zoneinfo (IANA time zone database) for local time -> UTC.
* EU summer time: ends the last Sunday of October, begins the last Sunday of March,
  at 01:00 UTC (Directive 2000/84/EC, from memory): 2031-10-26 and 2031-03-30.
* pandas itself for the alignment means (resample) and the raw text (read_csv).
"""

from __future__ import annotations

import datetime as dt
import io
import os
import warnings
from collections.abc import Mapping
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pytest

from perftest.errors import DataError, DataQualityWarning, InputError, PerftestError, UnitError
from perftest.importers import read_run
from perftest.plant.file import load_plant

# Every SI value below is one multiply-add of the logged number: relative rounding
# of a few ulp, so 1e-12 is far above float noise and far below any wrong factor.
RTOL = 1e-12

C_TO_K = 273.15  # SI Brochure 9th ed., 2.3.1
BAR = 1.0e5  # Pa, SI Brochure 9th ed., Table 8
# Pa: 1 lbf/in2 from the exact definitions 1 lb = 0.45359237 kg, 1 in = 0.0254 m
# (international yard and pound, 1959) and g_n = 9.80665 m/s2 (3rd CGPM 1901);
# NIST SP 811 B.8 rounds it to 6.894 757 E+03 (from memory).
PSI = 0.45359237 * 9.80665 / 0.0254**2
T_PER_H = 1000.0 / 3600.0  # kg/s per t/h, SI Brochure Table 8 (tonne, hour)


def write(tmp_path, name, text, encoding="utf-8"):
    path = tmp_path / name
    path.write_text(text, encoding=encoding)
    return path


def plant_file(tmp_path, body, site='timezone = "UTC"'):
    return load_plant(write(tmp_path, "plant.toml", f'[site]\nname = "Rig 7"\n{site}\n\n{body}'))


def quiet_read(*args, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataQualityWarning)
        return read_run(*args, **kw)


# --- units and SI ------------------------------------------------------------------------

UNITS_ROW = """\
time,TT-101,PT-101,FT-101,JT-101,TT-102
,degC,bar,t/h,MW,degF
2031-05-04 10:00:00,25.0,10.0,36.0,12.5,212.0
2031-05-04 10:01:00,-10.5,0.5,0.0,0.001,32.0
"""


def test_units_row_converted_to_si(tmp_path):
    run = read_run(write(tmp_path, "hist.csv", UNITS_ROW))
    d = run.data
    np.testing.assert_allclose(d["TT-101"], [25.0 + C_TO_K, -10.5 + C_TO_K], rtol=RTOL)
    np.testing.assert_allclose(d["PT-101"], [10.0 * BAR, 0.5 * BAR], rtol=RTOL)
    np.testing.assert_allclose(d["FT-101"], [36.0 * T_PER_H, 0.0], rtol=RTOL)
    np.testing.assert_allclose(d["JT-101"], [12.5e6, 1.0e3], rtol=RTOL)
    # 212 degF is the boiling point of water at 1 atm, 373.15 K; 32 degF is 273.15 K
    np.testing.assert_allclose(d["TT-102"], [373.15, 273.15], rtol=RTOL)
    assert run.units == {
        "TT-101": "degC",
        "PT-101": "bar",
        "FT-101": "t/h",
        "JT-101": "MW",
        "TT-102": "degF",
    }
    assert run.quantities["FT-101"] == "mass_flow"
    assert run.quantities["TT-101"] == "temperature"
    assert str(d.index.tz) == "UTC"


def test_units_from_plant_file_and_calibration(tmp_path):
    path = write(
        tmp_path,
        "run.csv",
        "time,TT-101,PT-101\n2031-05-04 10:00:00,100.0,10.0\n2031-05-04 10:01:00,50.0,-0.2\n",
    )
    plant = plant_file(
        tmp_path,
        '[tags.TT-101]\nquantity = "temperature"\nunit = "degC"\ncalibration = [0.3, 0.99]\n'
        '[tags.PT-101]\nquantity = "pressure"\nunit = "psig"\n',
        site='timezone = "UTC"\natmospheric_pressure = { value = 101.325, unit = "kPa" }',
    )
    run = read_run(path, plant)
    # calibration in the tag's unit (degC) before the offset to kelvin
    np.testing.assert_allclose(
        run.data["TT-101"], [0.3 + 0.99 * 100.0 + C_TO_K, 0.3 + 0.99 * 50.0 + C_TO_K], rtol=RTOL
    )
    # gauge: p = p_atm + x * psi; a small vacuum reading stays positive absolute
    np.testing.assert_allclose(
        run.data["PT-101"], [101325.0 + 10.0 * PSI, 101325.0 - 0.2 * PSI], rtol=RTOL
    )


def test_units_argument_and_unknown_column_kept_without_plant(tmp_path):
    path = write(tmp_path, "run.csv", "time,A,B\n2031-05-04 10:00:00,1.5,2\n")
    run = read_run(path, units={"A": "kPa"})
    assert run.data["A"].iloc[0] == pytest.approx(1500.0, rel=RTOL)
    assert run.quantities["A"] == "pressure"
    # no unit anywhere: kept as read, and the log says so
    assert run.data["B"].iloc[0] == 2.0
    assert any("'B' has no unit" in line for line in run.log)


def test_barometer_tag_sample_by_sample(tmp_path):
    path = write(
        tmp_path,
        "run.csv",
        "time,PB-001,PT-101\n,mbar,barg\n"
        "2031-05-04 10:00:00,1000.0,2.0\n"
        "2031-05-04 10:01:00,990.0,2.0\n"
        "2031-05-04 10:02:00,Bad,2.0\n"
        "2031-05-04 10:03:00,1010.0,2.0\n",
    )
    plant = plant_file(
        tmp_path,
        '[tags.PB-001]\nquantity = "pressure"\n[tags.PT-101]\nquantity = "pressure"\n',
        site='timezone = "UTC"\nbarometer_tag = "PB-001"',
    )
    run = quiet_read(path, plant)
    # 1 mbar = 100 Pa (SI Brochure Table 8, bar = 1e5 Pa). The masked barometer sample
    # at 10:02 is bridged linearly between 990 and 1010 mbar (the documented rule).
    atm = np.array([1000.0, 990.0, 1000.0, 1010.0]) * 100.0
    np.testing.assert_allclose(run.data["PT-101"], atm + 2.0 * BAR, rtol=RTOL)
    assert run.mask["PB-001"].tolist() == [False, False, True, False]


def test_negative_absolute_pressure_names_file_column_line(tmp_path):
    path = write(
        tmp_path,
        "vac.csv",
        "time,PT-5\n,barg\n2031-05-04 10:00:00,0.5\n2031-05-04 10:01:00,-1.2\n",
    )
    plant = plant_file(
        tmp_path,
        '[tags.PT-5]\nquantity = "pressure"\n',
        site='atmospheric_pressure = { value = 1.0, unit = "bar" }',
    )
    with pytest.raises(DataError, match=r"vac\.csv, line 4, column 'PT-5'.*0 Pa"):
        read_run(path, plant)


def test_units_row_conflicts_with_plant(tmp_path):
    path = write(tmp_path, "run.csv", "time,TT-1\n,degF\n2031-05-04 10:00:00,1\n")
    plant = plant_file(tmp_path, '[tags.TT-1]\nquantity = "temperature"\nunit = "degC"\n')
    with pytest.raises(DataError, match=r"run\.csv, column 'TT-1'.*'degF'.*'degC'"):
        read_run(path, plant)


def test_same_unit_spelled_differently_is_no_conflict(tmp_path):
    path = write(tmp_path, "run.csv", "time,TT-1\n,deg C\n2031-05-04 10:00:00,1\n")
    plant = plant_file(tmp_path, '[tags.TT-1]\nquantity = "temperature"\nunit = "degC"\n')
    assert read_run(path, plant).data["TT-1"].iloc[0] == pytest.approx(1 + C_TO_K, rel=RTOL)


def test_unknown_unit_names_column(tmp_path):
    path = write(tmp_path, "run.csv", "time,TT-1,FT-2\n,degC,furlongs/fortnight\n2031-05-04,1,2\n")
    with pytest.raises(UnitError, match=r"run\.csv, line 2, column 'FT-2'"):
        read_run(path)


# --- separators, decimals, encodings ---------------------------------------------------


def test_semicolon_and_decimal_comma_detected(tmp_path):
    path = write(
        tmp_path,
        "logger.csv",
        "Zeit;TT-1;PT-1\n;degC;kPa\n04.05.2031 10:00:00;12,5;101,3\n04.05.2031 10:00:05;-0,25;99\n",
    )
    run = read_run(path, time_column="Zeit")
    np.testing.assert_allclose(run.data["TT-1"], [12.5 + C_TO_K, -0.25 + C_TO_K], rtol=RTOL)
    np.testing.assert_allclose(run.data["PT-1"], [101300.0, 99000.0], rtol=RTOL)
    # dotted dates are day.month.year: 4 May
    assert run.data.index[0] == pd.Timestamp("2031-05-04 10:00:00", tz="UTC")


def test_tab_separator_and_explicit_options(tmp_path):
    path = write(tmp_path, "t.tsv", "time\tA\n2031-05-04 10:00:00\t1,5\n2031-05-04 10:01:00\t2\n")
    run = read_run(path, sep="\t", decimal=",", units={"A": "kW"})
    np.testing.assert_allclose(run.data["A"], [1500.0, 2000.0], rtol=RTOL)


def test_cp1252_units_row_and_bom(tmp_path):
    path = tmp_path / "win.csv"
    path.write_bytes("\ufefftime;T\r\n;°C\r\n2031-05-04 10:00:00;1,0\r\n".encode("utf-8"))
    assert read_run(path).data["T"].iloc[0] == pytest.approx(1.0 + C_TO_K, rel=RTOL)
    path2 = tmp_path / "win2.csv"
    path2.write_bytes("time;T\r\n;°C\r\n2031-05-04 10:00:00;2,0\r\n".encode("cp1252"))
    run = read_run(path2)
    assert run.data["T"].iloc[0] == pytest.approx(2.0 + C_TO_K, rel=RTOL)
    assert any("cp1252" in line for line in run.log)


# --- time stamps ---------------------------------------------------------------------------


def test_offsets_in_stamps_are_honoured(tmp_path):
    path = write(
        tmp_path,
        "run.csv",
        "time,A\n2031-05-04T10:00:00+02:00,1\n2031-05-04T08:01:00Z,2\n2031-05-04T03:32:00-05:00,3\n",
    )
    run = read_run(path, timezone="Asia/Tokyo")  # ignored: the stamps carry offsets
    expected = [
        dt.datetime(2031, 5, 4, 8, 0, tzinfo=dt.UTC),
        dt.datetime(2031, 5, 4, 8, 1, tzinfo=dt.UTC),
        dt.datetime(2031, 5, 4, 8, 32, tzinfo=dt.UTC),
    ]
    assert list(run.data.index) == [pd.Timestamp(t) for t in expected]


def test_naive_stamps_use_timezone_argument_then_plant(tmp_path):
    path = write(tmp_path, "run.csv", "time,TT-1\n2031-07-01 12:00:00,1\n")
    local = dt.datetime(2031, 7, 1, 12, 0, tzinfo=ZoneInfo("America/Chicago"))
    run = read_run(path, timezone="America/Chicago", units={"TT-1": "K"})
    assert run.data.index[0] == pd.Timestamp(local.astimezone(dt.UTC))
    plant = plant_file(
        tmp_path,
        '[tags.TT-1]\nquantity = "temperature"\nunit = "K"\n',
        site='timezone = "Asia/Kolkata"',
    )
    run = read_run(path, plant)
    local = dt.datetime(2031, 7, 1, 12, 0, tzinfo=ZoneInfo("Asia/Kolkata"))
    assert run.data.index[0] == pd.Timestamp(local.astimezone(dt.UTC))


def test_autumn_repeated_hour_resolved_by_row_order(tmp_path):
    rows = ["00:30", "01:30", "02:00", "02:30", "02:00", "02:30", "03:00"]
    text = "time,A\n" + "".join(f"2031-10-26 {t}:00,{i}\n" for i, t in enumerate(rows))
    run = read_run(write(tmp_path, "dst.csv", text), timezone="Europe/Berlin")
    berlin = ZoneInfo("Europe/Berlin")
    expected = []
    for i, t in enumerate(rows):
        h, m = map(int, t.split(":"))
        fold = 1 if i >= 4 else 0  # second pass through 02:00-03:00 is standard time
        local = dt.datetime(2031, 10, 26, h, m, tzinfo=berlin, fold=fold)
        expected.append(pd.Timestamp(local.astimezone(dt.UTC)))
    assert list(run.data.index) == expected
    assert run.data.index.is_monotonic_increasing


def test_spring_gap_names_line(tmp_path):
    text = "time,A\n2031-03-30 01:30:00,1\n2031-03-30 02:30:00,2\n"
    with pytest.raises(DataError, match=r"gap\.csv, line 3, column 'time'.*does not exist"):
        read_run(write(tmp_path, "gap.csv", text), timezone="Europe/Berlin")


def test_ambiguous_hour_without_order_names_line(tmp_path):
    text = "time,A\n2031-10-26 02:10:00,1\n2031-10-26 02:20:00,2\n"
    with pytest.raises(DataError, match=r"amb\.csv, line 2, column 'time'.*occurs twice"):
        read_run(write(tmp_path, "amb.csv", text), timezone="Europe/Berlin")


def test_separate_date_and_time_columns(tmp_path):
    path = write(tmp_path, "dt.csv", "Date,Time,A\n2031-05-04,10:00:00,1\n2031-05-04,10:00:05,2\n")
    run = read_run(path)
    assert list(run.data.index) == list(
        pd.to_datetime(["2031-05-04 10:00:00", "2031-05-04 10:00:05"]).tz_localize("UTC")
    )


def test_time_column_found_by_content(tmp_path):
    path = write(tmp_path, "c.csv", "A,Stamp,B\n1,2031-05-04 10:00:00,2\n3,2031-05-04 10:01:00,4\n")
    run = read_run(path)
    assert list(run.data.columns) == ["A", "B"]
    assert run.data["A"].tolist() == [1.0, 3.0]


def test_duplicates_keep_first_and_are_recorded(tmp_path):
    text = (
        "time,A\n2031-05-04 10:00:00,1\n2031-05-04 10:01:00,2\n"
        "2031-05-04 10:01:00,99\n2031-05-04 10:02:00,3\n"
    )
    with pytest.warns(DataQualityWarning, match="repeat an earlier time stamp"):
        run = read_run(write(tmp_path, "dup.csv", text))
    assert run.data["A"].tolist() == [1.0, 2.0, 3.0]
    ex = run.exclusions
    row = ex[ex["reason"].str.startswith("duplicate")]
    assert len(row) == 1 and row["raw_value"].iloc[0] == 99.0
    assert any("lines 4 (repeats 3)" in line for line in run.log)
    assert len(run.raw["dup"]) == 4  # raw keeps every row as read


def test_backwards_stamp_names_line(tmp_path):
    text = "time,A\n2031-05-04 10:00:00,1\n2031-05-04 10:02:00,2\n2031-05-04 10:01:00,3\n"
    with pytest.raises(DataError, match=r"back\.csv, line 4.*earlier than.*line 3"):
        read_run(write(tmp_path, "back.csv", text))


def test_gap_is_logged(tmp_path):
    stamps = ["10:00:00", "10:00:05", "10:00:10", "10:00:40", "10:00:45"]
    text = "time,A\n" + "".join(f"2031-05-04 {s},1\n" for s in stamps)
    run = read_run(write(tmp_path, "g.csv", text))
    # median interval 5 s; 30 s > 1.5 x 5 s is a gap
    assert any("1 gap(s)" in line and "30 s" in line for line in run.log)


# --- masks ---------------------------------------------------------------------------------

SENTINELS = """\
time,A,B
2031-05-04 10:00:00,1.0,5
2031-05-04 10:00:05,,5
2031-05-04 10:00:10,Bad,5
2031-05-04 10:00:15,I/O Timeout,5
2031-05-04 10:00:20,NaN,5
2031-05-04 10:00:25,#N/A,5
2031-05-04 10:00:30,Calc Failed,5
2031-05-04 10:00:35,-9999,5
2031-05-04 10:00:40,9999999,5
2031-05-04 10:00:45,oops,5
2031-05-04 10:00:50,7.0,-1
2031-05-04 10:00:55,8.0,Frozen
"""


def test_sentinels_and_text_cells_masked_with_reasons(tmp_path):
    path = write(tmp_path, "s.csv", SENTINELS)
    run = read_run(path, sentinels=[-1, "frozen"])
    a = run.data["A"]
    assert a.notna().tolist() == [True] + [False] * 9 + [True, True]
    assert run.mask["A"].tolist() == a.isna().tolist()
    ex = run.exclusions.set_index(["tag", "time"])
    reasons = ex.loc["A", "reason"].tolist()
    assert reasons[0] == "blank cell"
    assert reasons[1] == "sentinel text 'Bad'"
    assert reasons[3] == "NaN in the file"
    assert reasons[4] == "sentinel text '#N/A'"
    assert reasons[7] == "sentinel value 9999999"
    assert reasons[8] == "text 'oops' in a numeric cell (line 11)"
    assert ex.loc["A", "raw_value"].tolist()[:4] == ["", "Bad", "I/O Timeout", "NaN"]
    # the argument's sentinels: -1 and "frozen" (any case)
    assert run.mask["B"].tolist() == [False] * 10 + [True, True]
    # raw keeps the cell text exactly
    raw = pd.read_csv(path, dtype=str, keep_default_na=False)
    assert run.raw["s"]["A"].fillna("").tolist() == raw["A"].tolist()


def test_plant_tag_sentinels(tmp_path):
    path = write(tmp_path, "p.csv", "time,A\n,kW\n2031-05-04 10:00:00,1\n2031-05-04 10:01:00,0\n")
    plant = plant_file(tmp_path, '[tags.A]\nquantity = "power"\nsentinels = [0]\n')
    run = read_run(path, plant)
    assert run.mask["A"].tolist() == [False, True]
    assert run.exclusions["reason"].tolist() == ["sentinel value 0"]


def test_whole_text_column_names_file_and_column(tmp_path):
    text = "time,A,Note\n2031-05-04 10:00:00,1,start\n2031-05-04 10:01:00,2,steady\n"
    with pytest.raises(DataError, match=r"notes\.csv, column 'Note'.*text and no numbers"):
        read_run(write(tmp_path, "notes.csv", text))


@pytest.mark.parametrize("qname", ["A.Q", "A_status", "A quality", "A.quality", "A_STATUS"])
def test_quality_columns(tmp_path, qname):
    flags = ["Good", "OK", "192", "0", "Bad", "", "Uncertain", "192.0"]
    text = f"time,A,{qname}\n" + "".join(
        f"2031-05-04 10:00:{5 * i:02d},{i},{f}\n" for i, f in enumerate(flags)
    )
    run = read_run(write(tmp_path, "q.csv", text))
    assert list(run.data.columns) == ["A"]
    assert run.mask["A"].tolist() == [False, False, False, False, True, True, True, False]
    reasons = run.exclusions["reason"].tolist()
    assert reasons[0] == f"quality flag 'Bad' in column {qname!r}"


# --- several files -------------------------------------------------------------------------


def _fast_slow(tmp_path):
    t_fast = pd.date_range("2031-05-04 10:00:05", "2031-05-04 10:10:00", freq="5s")
    rng = np.random.default_rng(7)
    fast = pd.DataFrame({"TT-9": np.round(20 + rng.normal(0, 0.2, t_fast.size), 3)}, t_fast)
    cells = fast["TT-9"].map(repr).tolist()
    cells[3] = "Bad"  # a masked sample must drop out of its interval's mean
    cells[30:42] = [""] * 12  # 10:02:35 .. 10:03:30: (10:02, 10:03] keeps 5 samples
    lines = "".join(f"{t:%Y-%m-%d %H:%M:%S},{c}\n" for t, c in zip(t_fast, cells, strict=True))
    write(tmp_path, "logger.csv", "time,TT-9\n,degC\n" + lines)
    t_slow = pd.date_range("2031-05-04 10:00:00", "2031-05-04 10:10:00", freq="60s")
    slow = "".join(f"{t:%Y-%m-%d %H:%M:%S},{100 + i}\n" for i, t in enumerate(t_slow))
    write(tmp_path, "historian.csv", "time,FT-1\n,t/h\n" + slow)
    truth = pd.to_numeric(pd.Series(cells, index=t_fast), errors="coerce")
    return truth, t_slow


def test_alignment_of_5s_and_60s_files_matches_pandas(tmp_path):
    truth, t_slow = _fast_slow(tmp_path)
    run = quiet_read([tmp_path / "historian.csv", tmp_path / "logger.csv"])
    # pandas reference: mean of each right-closed minute (t - 60 s, t], stamped at its end,
    # anchored at the historian's first stamp.
    ref = (
        truth.resample("60s", closed="right", label="right", origin=t_slow[0]).mean() + C_TO_K
    ).tz_localize("UTC")
    got = run.data["TT-9"]
    assert list(got.index) == list(t_slow.tz_localize("UTC"))
    np.testing.assert_allclose(got.loc[ref.index].to_numpy(), ref.to_numpy(), rtol=RTOL)
    # (09:59, 10:00] lies before the logger's record (its first stamp is 10:00:05):
    # NaN and masked, but not an excluded sample; the log counts the stamp
    assert np.isnan(got.iloc[0]) and run.mask["TT-9"].iloc[0]
    ex = run.exclusions[run.exclusions["tag"] == "TT-9"]
    assert not (ex["reason"].str.startswith("no sample") & (ex["time"] == got.index[0])).any()
    assert any("logger.csv: 1 stamp(s) of the time base lie outside" in s for s in run.log)
    # the coarse file is not interpolated: its samples keep their stamps and values
    np.testing.assert_allclose(
        run.data["FT-1"].to_numpy(), (100 + np.arange(11)) * T_PER_H, rtol=RTOL
    )
    assert any("time base: 1 min" in line for line in run.log)


def test_every_sets_the_base(tmp_path):
    truth, _ = _fast_slow(tmp_path)
    run = quiet_read(tmp_path / "logger.csv", every="2min")
    ref = (
        truth.resample("2min", closed="right", label="right", origin="epoch").mean() + C_TO_K
    ).tz_localize("UTC")
    np.testing.assert_allclose(run.data["TT-9"].to_numpy(), ref.to_numpy(), rtol=RTOL)


def test_tag_in_two_files_needs_source(tmp_path):
    write(tmp_path, "h.csv", "time,A\n,kW\n2031-05-04 10:00:00,1\n2031-05-04 10:01:00,1\n")
    write(tmp_path, "l.csv", "time,A\n,kW\n2031-05-04 10:00:00,2\n2031-05-04 10:01:00,2\n")
    files = [tmp_path / "h.csv", tmp_path / "l.csv"]
    plant = plant_file(tmp_path, '[tags.A]\nquantity = "power"\n')
    with pytest.raises(DataError, match=r"'A' is in 'h\.csv', 'l\.csv'.*source"):
        read_run(files, plant)
    with pytest.raises(DataError, match=r"Column 'A' is in both h\.csv and l\.csv"):
        read_run(files)
    plant = plant_file(tmp_path, '[tags.A]\nquantity = "power"\nsource = "l"\n')
    assert read_run(files, plant).data["A"].tolist() == [2000.0, 2000.0]


def test_missing_tag_and_ignored_columns(tmp_path):
    path = write(tmp_path, "h.csv", "time,A,X\n,kW,kW\n2031-05-04 10:00:00,1,3\n")
    plant = plant_file(tmp_path, '[tags.A]\nquantity = "power"\n')
    run = read_run(path, plant)
    assert list(run.data.columns) == ["A"]
    assert any("not read: 'X'" in line for line in run.log)
    plant = plant_file(tmp_path, '[tags.A]\nquantity = "power"\n[tags.B]\nquantity = "power"\n')
    with pytest.raises(DataError, match=r"Tag 'B'.*no column 'B' in 'h\.csv'") as err:
        read_run(path, plant)
    assert err.value.tag == "B"


# --- bad input -----------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("name", "content", "pattern"),
    [
        ("empty.csv", b"", r"empty\.csv: the file is empty"),
        ("blank.csv", b"\n\n  \n", r"blank\.csv: the file is empty"),
        ("bin.csv", b"PK\x03\x04\x00\x00binary", r"bin\.csv: the file looks binary"),
        ("head.csv", b"time,A,B\n", r"head\.csv: the file has a header.*no data"),
        ("head2.csv", b"time,A\n,kW\n", r"head2\.csv: the file has a header.*no data"),
        ("one.csv", b"time\n2031-05-04\n", r"one\.csv: no comma, semicolon or tab found"),
        (
            "stamp.csv",
            b"time,A\n2031-05-04 10:00:00,1\n2031-05-04 1O:01:00,2\n",
            r"stamp\.csv, line 3, column 'time': cannot read '2031-05-04 1O:01:00'",
        ),
        (
            "ragged.csv",
            b"time,A\n2031-05-04 10:00:00,1\n2031-05-04 10:01:00,2,3\n",
            r"ragged\.csv, line 3: the row has 3 fields but the header has 2",
        ),
        (
            "mixed.csv",
            b"time,A\n2031-05-04T10:00:00+01:00,1\n2031-05-04T10:01:00,2\n",
            r"mixed\.csv, line 3.*has no UTC offset",
        ),
        (
            "dupname.csv",
            b"time,A,A\n2031-05-04 10:00:00,1,2\n",
            r"dupname\.csv, line 1: the column name 'A' appears twice",
        ),
        ("notime.csv", b"A,B\n1,2\n", r"notime\.csv: no time column found"),
    ],
)
def test_bad_files(tmp_path, name, content, pattern):
    path = tmp_path / name
    path.write_bytes(content)
    with pytest.raises(DataError, match=pattern) as err:
        read_run(path)
    assert err.value.file is not None and name in err.value.file


def test_missing_file(tmp_path):
    with pytest.raises(DataError, match=r"nothere\.csv: the run file does not exist"):
        read_run(tmp_path / "nothere.csv")


@pytest.mark.parametrize(
    ("kw", "param"),
    [
        ({"every": "-1min"}, "every"),
        ({"every": "soon"}, "every"),
        ({"timezone": "Mars/Olympus"}, "timezone"),
        ({"decimal": ";"}, "decimal"),
        ({"sep": ";;"}, "sep"),
        ({"units": ["kW"]}, "units"),
        ({"sentinels": [None]}, "sentinels"),
    ],
)
def test_bad_arguments(tmp_path, kw, param):
    path = write(tmp_path, "ok.csv", "time,A\n2031-05-04 10:00:00,1\n")
    with pytest.raises(InputError, match=f"'{param}' parameter of read_run") as err:
        read_run(path, **kw)
    assert err.value.parameter == param


def test_no_paths():
    with pytest.raises(InputError, match="at least one CSV file"):
        read_run([])


def test_errors_are_one_line_perftest_errors(tmp_path):
    path = write(tmp_path, "x.csv", "time,A\n2031-05-04 10:00:00,1\n2031-05-04 09:00:00,1\n")
    with pytest.raises(PerftestError) as err:
        read_run(path)
    assert "\n" not in str(err.value)


def test_comment_lines_and_blank_lines_keep_line_numbers(tmp_path):
    text = (
        "# exported by the plant historian\n\ntime,A\n,kW\n"
        "2031-05-04 10:00:00,1\n\n2031-05-04 10:01:00,x\n2031-05-04 10:02:00,3\n"
    )
    run = read_run(write(tmp_path, "pre.csv", text))
    assert run.data["A"].tolist()[::2] == [1000.0, 3000.0]
    # the 'x' sits on line 7 of the file (comment, blank, header, units, row, blank, row)
    assert run.exclusions["reason"].tolist() == ["text 'x' in a numeric cell (line 7)"]
    assert any("header on line 3" in line for line in run.log)


# --- reading in pieces; Run.raw read again from the file -------------------------------------


def _log_text(newline="\n", rows=150):
    """A log whose surprises sit far from its first lines, so that they fall in later pieces:
    text cells, a blank, sentinels, bad quality flags, a repeated stamp; no final line end."""
    rng = np.random.default_rng(3)
    stamps = pd.date_range("2031-05-04 10:00", periods=rows, freq="10s").strftime(
        "%Y-%m-%d %H:%M:%S"
    )
    stamps = list(stamps)
    stamps[60] = stamps[59]  # a repeated stamp: the first row is kept
    a = [f"{v:.{rng.integers(1, 9)}f}" for v in rng.normal(50.0, 5.0, rows)]
    a[20], a[30], a[40], a[90], a[100] = "", "-9999", "NaN", "Bad", "oops"
    b = [f"{v:.3f}" for v in rng.normal(101.0, 1.0, rows)]
    q = ["Good"] * rows
    q[70], q[75] = "Bad", ""
    lines = ["time,A,B,B.Q", ",degC,kPa,"]
    lines += [",".join(r) for r in zip(stamps, a, b, q, strict=True)]
    return newline.join(lines)


@pytest.mark.parametrize("newline", ["\n", "\r\n", "\r"])
@pytest.mark.parametrize(("chunk", "tensors"), [(40, True), (333, True), (333, False)])
def test_pieces_and_row_estimate_do_not_change_the_run(
    tmp_path, monkeypatch, newline, chunk, tensors
):
    from perftest.importers import convert, csvfile

    path = tmp_path / "big.csv"
    path.write_bytes(_log_text(newline).encode())
    whole = quiet_read(path)  # the file fits in one piece
    # pieces of 40 bytes are shorter than a line (the piece grows); with too few rows
    # allocated at first, the value array is reallocated as the rows come in; and the
    # column-by-column copy of old pyarrow versions
    monkeypatch.setattr(csvfile, "CHUNK_BYTES", chunk)
    monkeypatch.setattr(convert, "_ROW_MARGIN", 0.05)
    monkeypatch.setattr(convert, "_TENSORS", tensors and convert._TENSORS)
    parts = quiet_read(path)
    pd.testing.assert_frame_equal(parts.data, whole.data)
    pd.testing.assert_frame_equal(parts.mask, whole.mask)
    pd.testing.assert_frame_equal(parts.exclusions, whole.exclusions)
    assert parts.log == whole.log
    # and both against pandas reading the same text (with "\n" line ends: pandas 3.1 keeps
    # the units row of a file whose lines end in a bare carriage return despite skiprows)
    ref = pd.read_csv(io.StringIO(_log_text()), skiprows=[1], dtype=str, keep_default_na=False)
    ref = ref[~ref["time"].duplicated()]
    a = pd.to_numeric(ref["A"], errors="coerce").to_numpy(copy=True)
    a[np.isin(a, [-9999.0])] = np.nan  # the built-in numeric sentinel
    np.testing.assert_allclose(parts.data["A"].to_numpy(), a + C_TO_K, rtol=RTOL)
    b = pd.to_numeric(ref["B"]).to_numpy(copy=True) * 1e3  # kPa, SI Brochure Table 7 (k = 1e3)
    b[ref["B.Q"].to_numpy() != "Good"] = np.nan
    np.testing.assert_allclose(parts.data["B"].to_numpy(), b, rtol=RTOL)
    reasons = parts.exclusions.groupby("tag")["reason"].apply(list)
    assert reasons["A"] == [
        "blank cell",
        "sentinel value -9999",
        "NaN in the file",
        "duplicate time stamp, first row kept",
        "sentinel text 'Bad'",
        f"text 'oops' in a numeric cell (line {100 + 3})",
    ]
    assert reasons["B"][1:] == [
        "quality flag 'Bad' in column 'B.Q'",
        "quality flag '' in column 'B.Q'",
    ]
    assert any("checked cell by cell: 'A'" in line for line in parts.log)


def test_raw_is_read_again_from_the_file_as_text(tmp_path):
    path = tmp_path / "big.csv"
    path.write_bytes(_log_text().encode())
    run = quiet_read(path)
    assert isinstance(run.raw, Mapping) and list(run.raw) == ["big"]
    raw = run.raw["big"]
    # pandas' own reading of the cells as text: blank cells missing, nothing else touched
    ref = pd.read_csv(path, skiprows=[1], dtype=str, keep_default_na=False, na_values=[""])
    pd.testing.assert_frame_equal(raw.reset_index(drop=True), ref)
    stamps = pd.to_datetime(ref["time"]).dt.tz_localize("UTC")
    assert list(raw.index) == list(stamps)  # every row, the repeated stamp too
    # a copy: changing it leaves the run's raw table as read
    raw.iloc[0, 1] = "changed"
    assert run.raw["big"].iloc[0, 1] == ref.iloc[0, 1]
    with pytest.raises(TypeError):
        run.raw["other"] = raw


def test_raw_of_a_changed_file_is_a_data_error(tmp_path):
    path = tmp_path / "big.csv"
    text = _log_text()
    path.write_bytes(text.encode())
    run = quiet_read(path)
    # same size, same modification time, one digit different: the CRC-32 tells
    stat = path.stat()
    i = text.index("2031-05-04 10:00:10")
    path.write_bytes((text[:i] + "2031-05-04 10:00:11" + text[i + 19 :]).encode())
    os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns))
    assert path.stat().st_size == stat.st_size
    with pytest.raises(DataError, match=r"big\.csv: the run file changed since it was imported"):
        run.raw["big"]
    path.write_bytes((text + "\n2031-05-04 11:00:00,1,2,Good").encode())
    with pytest.raises(DataError, match=r"its size is \d+ bytes, not \d+") as err:
        run.raw["big"]
    assert err.value.file is not None and "big.csv" in str(err.value.file)
    # what the import kept does not depend on the file any more
    path.unlink()
    assert run.exclusions["raw_value"].tolist()[:3] == ["", -9999.0, "NaN"]
    with pytest.raises(DataError, match=r"cannot be read any more"):
        run.raw["big"]
    assert run.average(tags=["B"])["B"].n_samples > 0
