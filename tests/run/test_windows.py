"""Tests of perftest.run.windows and .steady: bounds, coverage, the steadiest window."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from perftest.errors import DataError, InputError, StabilityWarning
from perftest.importers import read_run
from perftest.run.core import Run


def _frame(n=240, seed=1, freq="1min"):
    rng = np.random.default_rng(seed)
    idx = pd.date_range("2031-05-04 08:00", periods=n, freq=freq, tz="UTC")
    return pd.DataFrame(
        {
            "PT-1": 5.0e6 + 2.0e3 * rng.normal(size=n),
            "TT-1": 500.0 + 0.05 * rng.normal(size=n),
        },
        index=idx,
    )


def _quiet(func, *args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", StabilityWarning)
        return func(*args, **kwargs)


def test_window_past_the_end_of_the_data_is_refused():
    run = Run.from_frame(_frame())  # 08:00 .. 11:59, one sample a minute
    # a 2 h window that starts 2 min before the data end holds 2 of 120 samples
    with pytest.raises(
        DataError, match=r"11:58:00\+00:00 to .*13:58:00.* 2 of the 120 .*coverage 2%"
    ):
        run.window("2031-05-04 11:58", "2031-05-04 13:58")
    # asked for explicitly, it is accepted and says so in the log
    w = run.window("2031-05-04 11:58", "2031-05-04 13:58", min_coverage=0.0)
    assert len(w.data) == 2 and "coverage 1.7%" in w.log[-1]
    with pytest.raises(InputError, match="'min_coverage' parameter of Run.window"):
        run.window("2031-05-04 10:00", "2031-05-04 11:00", min_coverage=1.5)


def test_window_after_a_gap_is_refused_and_tag_coverage_reported():
    df = _frame()
    df.iloc[100:230] = np.nan  # 09:40 .. 11:49 empty: a window 10:00-12:00 keeps 10 of 120
    run = Run.from_frame(df)
    with pytest.raises(
        DataError, match=r"10 of the 120 expected .*coverage 8%, below the minimum 80%"
    ):
        run.window("2031-05-04 10:00", "2031-05-04 12:00")
    # one tag with a stretch of masked samples: refused by average, named with its coverage
    df = _frame()
    df.iloc[60:90, 1] = np.nan  # TT-1 loses 30 of the 120 samples of 09:00-11:00
    w = Run.from_frame(df).window("2031-05-04 09:00", "2031-05-04 11:00")
    with pytest.raises(DataError, match=r"tag\(s\) TT-1 \(75%\) hold less than .* 80%"):
        _quiet(w.average)
    m = _quiet(w.average, min_coverage=0.7)
    # valid / expected: 120 and 90 of 120 one-minute samples in a 2 h window
    assert m["PT-1"].coverage == pytest.approx(1.0, rel=1e-12)
    assert m["TT-1"].coverage == pytest.approx(0.75, rel=1e-12)
    assert m.to_frame(units="si")["coverage"].tolist() == pytest.approx([1.0, 0.75], rel=1e-12)


def test_steadiest_window_skips_a_calm_stub_after_a_gap():
    # the quietest stretch is 10 samples after a 110-minute gap: a 2 h window holding
    # them alone must not win (issue 16: "10 of 120 samples after a gap")
    rng = np.random.default_rng(3)
    n = 480
    idx = pd.date_range("2031-05-04 08:00", periods=n, freq="1min", tz="UTC")
    tt = 500.0 + 0.08 * rng.normal(size=n)
    tt[350:360] = 500.0 + 0.001 * rng.normal(size=10)  # calm stub
    tt[240:350] = np.nan  # the gap before it
    tt[360:] = np.nan  # and nothing after
    run = Run.from_frame(pd.DataFrame({"TT-1": tt}, index=idx), quantities={"TT-1": "temperature"})
    w = run.steadiest_window("2h", limits={"TT-1": 1.0})
    held = w.data["TT-1"].notna().sum()
    assert held >= 0.8 * 120  # the default minimum coverage, 80 %
    assert w.start < idx[240]  # most of it lies in the first, complete stretch
    # where no candidate reaches the coverage asked for, nothing is picked
    part = run.window("2031-05-04 11:00", "2031-05-04 13:00", min_coverage=0.0)
    with pytest.raises(DataError, match="coverage of at least 100%"):
        part.steadiest_window("90min", min_coverage=1.0, limits={"TT-1": 1.0})


def test_steadiest_and_stated_window_hold_the_same_samples():
    run = Run.from_frame(_frame(), quantities={"PT-1": "pressure", "TT-1": "temperature"})
    sw = run.steadiest_window("30min")
    w = run.window(sw.start, sw.end)
    assert sw.end - sw.start == pd.Timedelta("30min")
    # [start, end): the start sample is in, the end sample out, in both
    assert sw.data.index.equals(w.data.index)
    assert sw.data.index[0] == sw.start and sw.data.index[-1] < sw.end
    assert len(sw.data) == 30
    a, b = _quiet(sw.average), _quiet(w.average)
    np.testing.assert_array_equal(a.value, b.value)
    np.testing.assert_array_equal(a.cov, b.cov)


def test_last_sample_can_be_in_the_steadiest_window():
    # the calmest 30 minutes are the last 30 samples: the window [end - 30 min, end)
    # must reach one interval past the last sample to hold it
    df = _frame(n=120, seed=4)
    df.iloc[90:, 1] = 500.0 + 1e-4 * np.arange(30)
    df.iloc[:90, 1] += np.linspace(0, 5, 90)
    run = Run.from_frame(df[["TT-1"]], quantities={"TT-1": "temperature"})
    sw = run.steadiest_window("30min")
    assert sw.data.index[-1] == df.index[-1] and len(sw.data) == 30


def _write(tmp_path, name, text):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_stamp_only_one_file_fills_at_the_edge_is_not_an_excluded_sample(tmp_path):
    # a 1-minute historian ending 10:10:00 and a 5-second logger ending 10:10:55: the
    # logger's last samples make a 10:11:00 stamp the historian never logged.  That
    # stamp is outside the historian's record, not a masked sample of each of its tags.
    t_slow = pd.date_range("2031-05-04 10:00:00", "2031-05-04 10:10:00", freq="60s")
    slow = "".join(f"{t:%Y-%m-%d %H:%M:%S},{100 + i},{5 + i}\n" for i, t in enumerate(t_slow))
    h = _write(tmp_path, "historian.csv", "time,FT-1,PT-1\n,t/h,bar\n" + slow)
    t_fast = pd.date_range("2031-05-04 10:00:00", "2031-05-04 10:10:55", freq="5s")
    cells = [f"{20 + 0.01 * (i % 7):.2f}" for i in range(t_fast.size)]
    cells[40] = ""  # one real blank cell (10:03:20)
    fast = "".join(f"{t:%Y-%m-%d %H:%M:%S},{c}\n" for t, c in zip(t_fast, cells, strict=True))
    g = _write(tmp_path, "logger.csv", "time,TT-9\n,degC\n" + fast)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = read_run([h, g])
    assert run.data.index[-1] == pd.Timestamp("2031-05-04 10:11", tz="UTC")
    assert not run.exclusions["reason"].str.startswith("no sample").any()
    assert run.exclusions["reason"].tolist() == ["blank cell"]  # the one real exclusion
    m = _quiet(run.average, min_coverage=0.0)
    assert m["FT-1"].n_excluded == 0 and m["PT-1"].n_excluded == 0
    assert m["TT-9"].n_excluded == 0  # the blank's minute still has 11 valid samples
