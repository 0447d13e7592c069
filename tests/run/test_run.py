"""Tests of perftest.run (core, windows, steady, stability, outliers, averaging, quality)."""

from __future__ import annotations

import math
import textwrap
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from uncertainties import correlated_values

from perftest.errors import DataError, DataQualityWarning, InputError, StabilityWarning
from perftest.plant.file import load_plant
from perftest.run.core import Run

# Invented rig; names and numbers are made up.
PLANT = """\
[site]
name = "Kestrel Fen test rig"
timezone = "Europe/Berlin"
atmospheric_pressure = { value = 1.0, unit = "bar" }

[tags.PT-1]
quantity = "pressure"
unit = "bar"
uncertainty = { value = 0.5, kind = "percent_of_reading", level = 0.95 }

[tags.TT-1]
quantity = "temperature"
unit = "degC"
uncertainty = { value = 0.3, kind = "absolute", level = "standard" }
stability = { value = 0.2, kind = "absolute" }

[tags.FT-A]
quantity = "mass_flow"
unit = "kg/s"
uncertainty = { value = 0.2, kind = "absolute", level = "standard" }
shared_calibration = "lot-7"

[tags.FT-B]
quantity = "mass_flow"
unit = "kg/s"
uncertainty = { value = 0.2, kind = "absolute", level = "standard" }
shared_calibration = "lot-7"

[tags.FT-C]
quantity = "mass_flow"
unit = "kg/s"
uncertainty = { value = 0.2, kind = "absolute", level = "standard" }

[groups.FQ]
tags = ["FT-A", "FT-B"]
agreement = { value = 1.0, kind = "percent" }

[stability.mass_flow]
value = 5.0
kind = "percent"
"""


@pytest.fixture(scope="module")
def plant(tmp_path_factory):
    path = tmp_path_factory.mktemp("plant") / "rig.toml"
    path.write_text(textwrap.dedent(PLANT), encoding="utf-8")
    return load_plant(path)


def frame(n=120, seed=0, start="2031-05-04 08:00", freq="1min", tz="UTC", **offsets):
    rng = np.random.default_rng(seed)
    idx = pd.date_range(start, periods=n, freq=freq, tz=tz)
    df = pd.DataFrame(
        {
            "PT-1": 5.0e6 + 2.0e3 * rng.normal(size=n),
            "TT-1": 500.0 + 0.02 * rng.normal(size=n),
            "FT-A": 50.0 + 0.05 * rng.normal(size=n),
            "FT-B": 50.0 + 0.05 * rng.normal(size=n),
            "FT-C": 20.0 + 0.05 * rng.normal(size=n),
        },
        index=idx,
    )
    for tag, off in offsets.items():
        df[tag.replace("_", "-")] += off
    return df


# -- building, windows ----------------------------------------------------------


def test_from_frame_localises_naive_index_in_plant_zone(plant):
    df = frame(tz=None)
    run = Run.from_frame(df, plant=plant)
    # 08:00 in Berlin in May is 06:00 UTC (CEST = UTC+2, common fact)
    assert run.data.index[0] == pd.Timestamp("2031-05-04 06:00", tz="UTC")
    assert run.quantities["PT-1"] == "pressure" and run.units["TT-1"] == "degC"
    # without a plant: UTC
    assert Run.from_frame(df).data.index[0] == pd.Timestamp("2031-05-04 08:00", tz="UTC")


def test_window_is_half_open_and_reads_naive_times_in_plant_zone(plant):
    run = Run.from_frame(frame(), plant=plant)
    w = run.window("2031-05-04 10:10", "2031-05-04 10:40")  # Berlin = 08:10..08:40 UTC
    assert len(w.data) == 30
    assert w.data.index[0] == pd.Timestamp("2031-05-04 08:10", tz="UTC")
    assert w.data.index[-1] == pd.Timestamp("2031-05-04 08:39", tz="UTC")
    assert w.log[:-1] == run.log and "window" in w.log[-1]
    aware = run.window(pd.Timestamp("2031-05-04 08:10", tz="UTC"), "2031-05-04 10:40")
    assert aware.data.index.equals(w.data.index)


@pytest.mark.parametrize(
    "start, end, match",
    [
        ("2031-05-04 09:00", "2031-05-04 08:00", "'end' parameter of Run.window must be later"),
        ("2031-05-05 00:00", None, "No sample of the run falls in the window"),
        ("yesterday-ish", None, "'start' parameter of Run.window must be a time"),
    ],
)
def test_window_bad_input(start, end, match):
    run = Run.from_frame(frame())
    with pytest.raises(InputError, match=match):
        run.window(start, end)


def test_constructor_rejects_text_and_unsorted():
    df = frame()
    bad = df.assign(**{"PT-1": "x"})
    with pytest.raises(InputError, match="Column 'PT-1' of the run data must be numeric"):
        Run.from_frame(bad)
    with pytest.raises(InputError, match="must be sorted in time"):
        Run.from_frame(df.iloc[::-1])
    with pytest.raises(InputError, match="must have a DatetimeIndex"):
        Run.from_frame(df.reset_index(drop=True))


def test_constructor_keeps_agreeing_frames_and_fixes_the_rest():
    df = frame()
    df.iloc[5, 0] = np.nan
    mask = df.isna()
    run = Run(df, mask=mask)
    # float64 data NaN exactly where masked: kept as given, no copy of the values
    assert np.shares_memory(run.data.to_numpy(), df.to_numpy())
    assert run.mask.to_numpy().sum() == 1 and run.mask.iloc[5, 0]
    # a mask that misses a NaN is completed; a masked value that is not NaN becomes NaN
    # in the run only (pandas copy-on-write keeps the caller's frame as it was)
    partial = pd.DataFrame(False, index=df.index, columns=df.columns)
    partial.iloc[7, 1] = True
    fixed = Run(df, mask=partial)
    rows, cols = fixed.mask.to_numpy().nonzero()
    assert rows.tolist() == [5, 7] and cols.tolist() == [0, 1]
    assert np.isnan(fixed.data.iloc[7, 1]) and np.isfinite(df.iloc[7, 1])
    # integer columns are converted (a copy), NaN-free and unmasked
    ints = Run(pd.DataFrame({"N": np.arange(4)}, index=df.index[:4]))
    assert ints.data["N"].dtype == np.float64 and not ints.mask.to_numpy().any()
    with pytest.raises(InputError, match="'mask' parameter of Run must be a boolean"):
        Run(df, mask=mask.iloc[:3])


def test_from_frame_raw_is_a_read_only_copy_on_write_view():
    df = frame()
    run = Run.from_frame(df)
    df.iloc[0, 0] = -1.0  # changing the caller's frame later changes neither run nor raw
    assert run.raw["frame"].iloc[0, 0] != -1.0 and run.data.iloc[0, 0] != -1.0
    with pytest.raises(TypeError):
        run.raw["frame"] = df


# -- averaging --------------------------------------------------------------------


def test_average_single_tag_by_hand(plant):
    df = frame()
    m = Run.from_frame(df, plant=plant).average(autocorrelation=False, keep_members=True)
    x = df["PT-1"].to_numpy()
    rec = m["PT-1"]
    assert rec.value == pytest.approx(x.mean(), rel=1e-14)
    # GUM Eq. 5: s / sqrt(n) for independent samples
    assert rec.u_random == pytest.approx(x.std(ddof=1) / math.sqrt(120), rel=1e-12)
    # 0.5 % of reading stated at 95 %: U = 0.005 * mean, u = U / 1.960 (GUM 4.3.4)
    u_s = 0.005 * x.mean() / sps.norm.ppf(0.975)
    assert rec.u_systematic == pytest.approx(u_s, rel=1e-9)
    assert rec.u == pytest.approx(math.hypot(rec.u_random, u_s), rel=1e-12)
    # Welch-Satterthwaite (GUM G.2b) with the systematic part at infinite dof
    assert rec.dof == pytest.approx(rec.u**4 / (rec.u_random**4 / 119), rel=1e-9)
    assert rec.n_samples == 120 and rec.n_excluded == 0
    assert m.start == df.index[0] and m.end == df.index[-1]


def test_average_shared_lot_covariance_and_group(plant):
    df = frame()
    m_all = Run.from_frame(df, plant=plant).average(autocorrelation=False, keep_members=True)
    i, j, k = (m_all.index(t) for t in ("FT-A", "FT-B", "FT-C"))
    # same lot: systematic errors fully correlated, cov = u_s,i u_s,j = 0.2 * 0.2;
    # the two are members of one group (redundant meters), so their random parts
    # carry the sample correlation r of the joint record: + r u_r,i u_r,j
    r = np.corrcoef(df["FT-A"], df["FT-B"])[0, 1]
    ur = [m_all[t].u_random for t in ("FT-A", "FT-B")]
    assert m_all.cov[i, j] == pytest.approx(0.04 + r * ur[0] * ur[1], rel=1e-12)
    assert m_all.cov[i, k] == 0.0  # different lot (none)

    m = Run.from_frame(df, plant=plant).average(autocorrelation=False)
    assert "FQ" in m.tags and "FT-A" not in m.tags and "FT-B" not in m.tags
    g = m["FQ"]
    assert g.value == pytest.approx((df["FT-A"].mean() + df["FT-B"].mean()) / 2, rel=1e-14)
    # independent check with the `uncertainties` package: mean of two members
    # whose full covariance (random + shared systematic) is taken from m_all
    sub = m_all.subset(["FT-A", "FT-B"])
    a, b = correlated_values(list(sub.value), sub.cov)
    assert g.u == pytest.approx(((a + b) / 2).std_dev, rel=1e-9)
    # a shared lot is not averaged away: systematic part stays 0.2
    assert g.u_systematic == pytest.approx(0.2, rel=1e-12)
    assert g.n_samples == 240
    assert any("group 'FQ' averaged from 2 members" in s for s in m.notes)


def test_group_mean_keeps_wander_common_to_its_meters(plant):
    # numpy Monte Carlo: the two flow meters of group FQ see one common AR(1) load
    # wander (correlation time 10 samples, the e-folding lag of rho_k = phi^k) plus
    # their own white noise.  The spread of the group mean over 300 records is the
    # true u of one group mean; Run.average must report it, not the smaller u of
    # two independent meters.
    from scipy.signal import lfilter

    rng = np.random.default_rng(1616)
    n, reps, phi = 120, 300, math.exp(-1.0 / 10.0)
    idx = pd.date_range("2031-05-04 08:00", periods=n, freq="1min", tz="UTC")
    values, u = [], []
    for _ in range(reps):
        e = rng.normal(size=n) * 0.01
        e[0] /= math.sqrt(1.0 - phi**2)
        wander = lfilter([1.0], [1.0, -phi], e)
        df = pd.DataFrame(
            {
                "FT-A": 50.0 + wander + 0.01 * rng.normal(size=n),
                "FT-B": 50.0 + wander + 0.01 * rng.normal(size=n),
            },
            index=idx,
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataQualityWarning)
            g = Run.from_frame(df, plant=plant).average()["FQ"]
        values.append(g.value)
        u.append(g.u_random)
    spread = np.std(values, ddof=1)
    rms_u = math.sqrt(np.mean(np.square(u)))
    # 300 records know the spread to 4 % (1/sqrt(600)); the estimator itself runs
    # 0.87-0.98 on such records (tests/run/test_stats.py): 0.80-1.10 allowed.
    # Treated as independent meters the ratio is about sqrt(2) = 1.4.
    assert 0.80 <= spread / rms_u <= 1.10


def test_group_disagreement_is_flagged(plant):
    df = frame(FT_B=1.0)  # 2 % apart, agreement is 1 %
    with pytest.warns(DataQualityWarning, match="group 'FQ' members disagree: spread"):
        m = Run.from_frame(df, plant=plant).average()
    assert any("members disagree" in s for s in m.notes)
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataQualityWarning)
        Run.from_frame(frame(), plant=plant).average()  # 0.01 % apart: silent


def test_tag_without_plant_info_gets_note():
    m = Run.from_frame(frame()).average()
    assert np.all(m.u_systematic == 0.0)
    assert any("no instrument uncertainty in the plant" in s and "PT-1" in s for s in m.notes)


def test_fully_masked_tag_is_a_data_error(plant):
    df = frame()
    df.loc[df.index[30:60], "TT-1"] = np.nan
    run = Run.from_frame(df, plant=plant)
    w = run.window("2031-05-04 10:30", "2031-05-04 11:00")
    with pytest.raises(DataError, match="Tag 'TT-1' has no valid sample in the window") as e:
        w.average()
    assert e.value.tag == "TT-1"
    m = w.average(tags=["PT-1", "FT-C"])  # the way out named in the message
    assert m.tags == ("PT-1", "FT-C")


def test_average_200_tags_autocorrelated_matches_stats(plant):
    rng = np.random.default_rng(1)
    x = np.cumsum(rng.normal(size=(2000, 5)), axis=0) * 0.01 + rng.normal(size=(2000, 5))
    idx = pd.date_range("2031-01-01", periods=2000, freq="5s", tz="UTC")
    df = pd.DataFrame(x, index=idx, columns=[f"X{i}" for i in range(5)])
    m = Run.from_frame(df).average()
    from perftest.run import stats

    np.testing.assert_allclose(m.u_random, stats.random_uncertainty_of_mean(x), rtol=1e-12)
    # dof of the random part = that of the lag window (stats.mean_dof; systematic 0
    # here, so dof = that), fewer than n_eff - 1 on these wandering records
    np.testing.assert_allclose(m.dof, stats.mean_dof(x), rtol=1e-9)
    assert np.all(m.dof < stats.effective_sample_size(x) - 1.0)


# -- stability, steadiest window -------------------------------------------------------


def test_stability_table_against_numpy(plant):
    df = frame()
    df["PT-1"] += np.linspace(0.0, 6.0e4, 120)  # a 60 kPa ramp over the window
    with pytest.warns(StabilityWarning, match="PT-1"):
        st = Run.from_frame(df, plant=plant).stability()
    t = (df.index - df.index[0]).total_seconds().to_numpy()
    slope = np.polyfit(t, df["PT-1"].to_numpy(), 1)[0]
    row = st.loc["PT-1"]
    assert row["drift"] == pytest.approx(slope * t[-1], rel=1e-9)  # least squares, numpy
    dev = np.max(np.abs(df["PT-1"] - df["PT-1"].mean()))
    assert row["max_deviation"] == pytest.approx(dev, rel=1e-12)
    # default for pressure: 1 % of the mean (plant-file default, common practice)
    assert row["permissible"] == pytest.approx(0.01 * df["PT-1"].mean(), rel=1e-12)
    assert row["basis"] == "default" and not row["passed"]
    # tag override 0.2 (in degC, an interval) = 0.2 K; plant [stability.mass_flow] 5 %
    assert st.loc["TT-1", "permissible"] == pytest.approx(0.2)
    assert st.loc["TT-1", "basis"] == "plant tag"
    assert st.loc["FT-C", "permissible"] == pytest.approx(0.05 * df["FT-C"].mean(), rel=1e-12)
    assert st.loc["FT-C", "basis"] == "plant quantity" and st.loc["FT-C", "passed"]
    # a call argument wins over the plant
    st2 = Run.from_frame(df, plant=plant).stability({"PT-1": 1.0e5}, warn=False)
    assert st2.loc["PT-1", "permissible"] == 1.0e5 and st2.loc["PT-1", "passed"]


def test_stability_unknown_quantity_is_not_judged():
    st = Run.from_frame(frame()).stability()
    assert st["passed"].isna().all() and (st["basis"] == "none").all()


def _day(seed=2):
    rng = np.random.default_rng(seed)
    idx = pd.date_range("2031-05-04", periods=600, freq="1min", tz="UTC")
    t = np.arange(600)
    # load swings everywhere except 05:00-07:30 (samples 300-449)
    swing = np.where((t >= 300) & (t < 450), 0.0, 1.0) * np.sin(t / 17.0)
    df = pd.DataFrame(
        {
            "JT-1": 80e6 * (1 + 0.02 * swing) + 0.1e6 * rng.normal(size=600),
            "PT-1": 9e6 * (1 + 0.015 * swing) + 5e3 * rng.normal(size=600),
        },
        index=idx,
    )
    return Run.from_frame(df, quantities={"JT-1": "power", "PT-1": "pressure"})


def test_steadiest_window_finds_the_calm_stretch_and_matches_brute_force():
    run = _day()
    best = run.steadiest_window("90min")
    assert len(best.data) == 90
    assert best.data.index[0] >= pd.Timestamp("2031-05-04 05:00", tz="UTC")
    assert best.data.index[-1] < pd.Timestamp("2031-05-04 07:30", tz="UTC")
    # brute force: every full window scored by stability() itself
    idx = run.data.index
    scores = []
    for e in range(89, 600, 13):
        w = run.window(idx[e - 89], idx[e] + pd.Timedelta("1s"))
        scores.append((w.stability(warn=False)["ratio"].max(), e))
    s_min, e_min = min(scores)
    best7 = run.steadiest_window("90min", step="13min")
    assert best7.data.index[-1] == idx[e_min]
    # the log carries the score, equal to the direct computation (rounding only)
    logged = float(best7.log[-1].split("score ")[1].split(" ")[0])
    assert logged == pytest.approx(s_min, rel=1e-2)  # log prints 3 significant digits
    assert best7.stability(warn=False)["ratio"].max() == pytest.approx(s_min, rel=1e-9)


@pytest.mark.parametrize(
    "length, match",
    [
        ("-1h", "must be a positive duration"),
        ("two hours", "must be a duration"),
        ("2D", "is longer than the run"),
    ],
)
def test_steadiest_window_bad_length(length, match):
    with pytest.raises(InputError, match=match):
        _day().steadiest_window(length)


def test_steadiest_window_needs_a_limit():
    with pytest.raises(InputError, match="needs a permissible variation"):
        Run.from_frame(frame()).steadiest_window("30min")


# -- outliers, audit trail ---------------------------------------------------------


def test_screen_outliers_masks_records_and_average_skips(plant):
    df = frame()
    df.iloc[40, df.columns.get_loc("FT-C")] = 25.0  # a 100-sigma spike
    run = Run.from_frame(df, plant=plant)
    clean = run.screen_outliers(alpha=0.01, tags=["FT-C"])
    ex = clean.exclusions
    assert len(ex) == 1
    row = ex.iloc[0]
    assert row["tag"] == "FT-C" and row["time"] == df.index[40] and row["raw_value"] == 25.0
    assert row["reason"] == "outlier (modified Thompson tau, alpha=0.01)"
    assert clean.mask["FT-C"].sum() == 1 and np.isnan(clean.data["FT-C"].iloc[40])
    assert clean.raw["frame"]["FT-C"].iloc[40] == 25.0  # raw untouched
    assert "1 samples rejected (FT-C: 1)" in clean.log[-1]
    rec = clean.average(keep_members=True)["FT-C"]
    assert rec.n_samples == 119 and rec.n_excluded == 1
    assert rec.value == pytest.approx(df["FT-C"].drop(df.index[40]).mean(), rel=1e-14)
    # exclusions and log survive a later cut
    w = clean.window("2031-05-04 10:00", "2031-05-04 10:20")
    assert len(w.exclusions) == 1 and w.log[: len(clean.log)] == clean.log


def _ar1(seed, phi, n=10_000):
    """First-order autoregressive series with unit innovations, started stationary."""
    from scipy.signal import lfilter

    e = np.random.default_rng(seed).normal(size=n)
    e[0] /= math.sqrt(1.0 - phi * phi)
    return lfilter([1.0], [1.0, -phi], e)


def _one_tag(x):
    idx = pd.date_range("2031-05-04", periods=len(x), freq="1s", tz="UTC")
    return Run.from_frame(pd.DataFrame({"X": x}, index=idx))


@pytest.mark.parametrize("phi", [0.0, 0.9, 0.99])
def test_screen_outliers_keeps_the_scatter_of_long_logs(phi):
    from perftest.run import stats

    for seed in range(5):
        x = _ar1(seed, phi)
        with warnings.catch_warnings():
            warnings.simplefilter("error", DataQualityWarning)
            rejected = _one_tag(x).screen_outliers().mask["X"].to_numpy()
        # Bound: alpha = 0.05 is split over the 10,000 samples, so a record of independent
        # normal scatter loses a sample with probability about 0.05; autocorrelated scatter
        # a few samples at most.  0.5 % (50 samples) is two orders of magnitude above that,
        # and far below the ~18 % that the textbook iteration at 0.05 per test removes:
        assert rejected.mean() < 0.005
        assert stats.thompson_tau_outliers(x, 0.05).mean() > 0.10


def test_screen_outliers_catches_8_sigma_spikes():
    for seed in range(20):
        rng = np.random.default_rng(100 + seed)
        at = [0, int(rng.integers(1, 9_999)), 9_999]  # the ends have neighbours on one side
        sign = rng.choice([-1.0, 1.0], size=3)
        # white noise: the spiking samples read 8 standard deviations from the mean
        white = rng.normal(size=10_000)
        white[at] = 8.0 * sign
        # autocorrelated: 8 standard deviations of the series added to the samples
        ar = _ar1(seed, 0.9)
        ar[at] += 8.0 * ar.std() * sign
        for x in (white, ar):
            rejected = _one_tag(x).screen_outliers().mask["X"].to_numpy()
            assert rejected[at].all()
            assert rejected.sum() <= 3 + 3  # the spikes, and at most a few samples of scatter


def test_screen_outliers_spike_among_masked_samples_and_short_windows():
    x = np.random.default_rng(4).normal(size=300)
    x[100:104] = np.nan  # masked neighbours are left out of the median
    x[104] = 12.0
    x[200] = -12.0
    run = _one_tag(x)
    for window in (5, 11, 31, None):
        rejected = run.screen_outliers(window=window).mask["X"].to_numpy()
        assert rejected[104] and rejected[200]
        assert rejected.sum() == 4 + 2  # the masked samples stay masked, nothing else
    for bad in (10, 3, 2.0, "11"):
        with pytest.raises(InputError, match="'window' parameter of Run.screen_outliers") as e:
            run.screen_outliers(window=bad)
        assert e.value.parameter == "window"


def test_screen_outliers_warns_when_a_tenth_goes():
    x = np.random.default_rng(9).normal(size=20)
    x[[3, 9, 15]] += [1000.0, 100.0, 30.0]  # 15 % of the record: more than spikes
    with pytest.warns(DataQualityWarning, match="rejected more than 10%"):
        out = _one_tag(x).screen_outliers()
    assert out.mask["X"].to_numpy().nonzero()[0].tolist() == [3, 9, 15]


def test_report_quality_counts_gaps():
    df = frame()
    df.loc[df.index[10:15], "PT-1"] = np.nan  # one gap of 6 min between valid samples
    q = Run.from_frame(df).report_quality()
    assert q.loc["PT-1", "masked"] == 5 and q.loc["PT-1", "valid"] == 115
    assert q.loc["PT-1", "gaps"] == 1 and q.loc["PT-1", "longest_gap_s"] == 360.0
    assert q.loc["TT-1", "gaps"] == 0
    assert "missing value: 5" in q.loc["PT-1", "reasons"]
