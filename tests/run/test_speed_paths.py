"""The shortcuts of the per-window statistics against the general steps they stand for.

Averaging a window, judging its stability and testing its trend take shortcuts
when every sample is valid, remember a few things between windows (Student t
quantiles, fixed instrument uncertainties, the tag labels of a run) and read
times as integer ticks.  Each shortcut is compared here, digit for digit, with
what it replaces: numpy's nan-aware statistics, ``scipy.stats.t``, pandas'
``Series.mean`` and Timedelta arithmetic, the general (masking) steps of the same
estimator, and the plant's own ``TagSpec.systematic_standard_uncertainty``.
The caches are checked not to hand one plant's, unit's or run's values to another.
Data: invented numbers.
"""

from __future__ import annotations

import dataclasses
import textwrap
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats as sps
from scipy.signal import lfilter

from perftest.errors import InputError
from perftest.plant.file import load_plant
from perftest.run import averaging, stats, trend
from perftest.run import windows as run_windows
from perftest.run.common import column_list
from perftest.run.core import Run
from perftest.run.stability import judge, permissible, permissible_spec

# Invented rig; names and numbers are made up.
PLANT = """\
[site]
name = "Harrow Mere test rig"
timezone = "UTC"
barometer_tag = "PB-1"

[tags.PB-1]
quantity = "pressure"
unit = "hPa"
uncertainty = { value = 0.5, kind = "absolute", level = 0.95 }

[tags.PT-1]
quantity = "pressure"
unit = "barg"
uncertainty = { value = 0.5, kind = "percent_of_reading", level = 0.95 }

[tags.PT-2]
quantity = "pressure"
unit = "barg"
span = [0.0, 60.0]
uncertainty = { value = 0.25, kind = "percent_of_span", level = 0.95 }

[tags.TT-1]
quantity = "temperature"
uncertainty = { value = 0.3, kind = "absolute", level = "standard" }

[tags.FT-A]
quantity = "mass_flow"
unit = "kg/s"
uncertainty = { value = 0.2, kind = "absolute", level = "standard" }

[tags.FT-B]
quantity = "mass_flow"
unit = "kg/s"
uncertainty = { value = 0.3, kind = "percent_of_reading", level = 0.95 }

[groups.FQ]
tags = ["FT-A", "FT-B"]
"""


@pytest.fixture
def plant(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text(textwrap.dedent(PLANT), encoding="utf-8")
    return load_plant(path)


def _frame(n=15, seed=1):
    rng = np.random.default_rng(seed)
    idx = pd.date_range("2031-05-04 08:00", periods=n, freq="1min", tz="UTC")
    noise = lfilter([1.0], [1.0, -0.6], rng.normal(size=(n, 6)), axis=0)
    return pd.DataFrame(
        {
            "PB-1": 1.013e5 + 20.0 * noise[:, 0],
            "PT-1": 4.1e6 + 2.0e3 * noise[:, 1],
            "PT-2": 3.0e6 + 1.0e3 * noise[:, 2],
            "TT-1": 520.0 + 0.05 * noise[:, 3],
            "FT-A": 50.0 + 0.05 * noise[:, 4],
            "FT-B": 50.1 + 0.05 * noise[:, 5],
        },
        index=idx,
    )


def _run(plant, df=None, unit="degC"):
    """The rig's run; TT-1 has no unit in the plant, the run file says ``unit``."""
    return Run.from_frame(_frame() if df is None else df, plant=plant, units={"TT-1": unit})


def _records(n, k, seed, phi=0.6):
    rng = np.random.default_rng(seed)
    return lfilter([1.0], [1.0, -phi], rng.normal(size=(n, k)), axis=0) * 3.0 + 1.0e3


# -- Student t: the survival function and the remembered coverage factors ---------


def test_t_sf_equals_scipy_everywhere():
    # scipy.stats.t.sf is the reference, edge values included (NaN, +-inf, df <= 0)
    rng = np.random.default_rng(3)
    x = np.r_[rng.normal(size=400) * 6.0, 0.0, -0.0, np.nan, np.inf, -np.inf, 50.0, 2.0, 2.0]
    df = np.r_[rng.uniform(0.2, 400.0, 400), 1.0, 2.0, 3.0, 4.0, 5.0, 1.0, np.nan, 0.0]
    np.testing.assert_array_equal(stats._t_sf(x, df), sps.t.sf(x, df))


@pytest.mark.parametrize("dof", [1.0, 2.5, 7, 30.0, np.float64(16.0), np.inf])
@pytest.mark.parametrize("level", [0.95, 0.99, 0.6827])
def test_coverage_factor_remembered_per_dof_and_level(dof, level):
    # the quantile of scipy.stats.t (norm for infinite dof), asked twice
    q = 0.5 + level / 2.0
    expected = sps.norm.ppf(q) if np.isinf(dof) else sps.t.ppf(q, dof)
    assert stats.coverage_factor(dof, level) == expected
    assert stats.coverage_factor(dof, level) == expected
    assert stats.coverage_factor(np.array([dof]), level)[0] == expected


def test_coverage_factor_cache_does_not_mix_levels_and_checks_every_call():
    k95 = stats.coverage_factor(10, 0.95)
    k99 = stats.coverage_factor(10, 0.99)
    assert k95 == sps.t.ppf(0.975, 10) and k99 == sps.t.ppf(0.995, 10)
    # a float32 level computes its own quantile (0.5 + level / 2 in float32)
    assert stats.coverage_factor(10, np.float32(0.9)) == sps.t.ppf(0.5 + np.float32(0.9) / 2, 10)
    with pytest.raises(InputError, match="must be positive"):
        stats.coverage_factor(0.0, 0.95)
    with pytest.raises(InputError, match="must lie in"):
        stats.coverage_factor(10, 1.5)


# -- complete records: shortcut against the general (masking) steps ---------------


@pytest.mark.parametrize("layout", ["column", "row", "view"])
@pytest.mark.parametrize("n", [3, 4, 15, 16, 61])
def test_variance_of_the_mean_shortcut_equals_general_steps(layout, n):
    x = _records(n, 7, seed=n)
    x = {
        "column": np.asfortranarray(x),
        "row": np.ascontiguousarray(x),
        "view": np.asfortranarray(np.hstack([x, x]))[:, ::2],
    }[layout]
    for kw in ({"with_dof": True}, {"with_gamma": True}, {}):
        fast = stats._mean_variance_columns(x, None, **kw)
        general = stats._mean_variance_columns(x, None, general=True, **kw)
        for a, b in zip(fast, general, strict=True):
            np.testing.assert_array_equal(a, b)


def test_mean_statistics_shortcut_equals_numpy_nan_functions():
    # the shortcut must give nanmean's and nanstd's digits (the functions used before)
    for layout in (np.asfortranarray, np.ascontiguousarray):
        x = layout(_records(40, 5, seed=7))
        m, mean, s, *_ = stats.mean_statistics(x, autocorrelation=False)
        np.testing.assert_array_equal(mean, np.nanmean(x, axis=0))
        np.testing.assert_array_equal(s, np.nanstd(x, axis=0, ddof=1))
        np.testing.assert_array_equal(m, np.full(5, 40))


def test_slope_shortcut_equals_general_steps():
    x = np.asfortranarray(_records(30, 6, seed=5))
    t = np.cumsum(np.r_[0.0, np.full(29, 60.0)])
    t[10:] += 30.0  # one late stamp
    fast = trend._slope_statistics(x, t)
    # a strided copy of the times takes the general steps on the same numbers
    general = trend._slope_statistics(x, np.repeat(t, 2)[::2])
    for a, b in zip(fast, general, strict=True):
        np.testing.assert_array_equal(a, b)


def test_slope_weights_remembered_per_sampling_pattern():
    # windows of one sampling pattern share the slope weights; another pattern of the
    # same length must get its own (the general steps recompute them every time)
    x = np.asfortranarray(_records(15, 4, seed=9))
    regular = np.arange(15) * 60.0
    late = regular.copy()
    late[7:] += 30.0
    trend._PRODUCTS.clear()
    first = trend._slope_statistics(x, regular)
    for t in (late, regular):
        fast = trend._slope_statistics(x, t)
        general = trend._slope_statistics(x, np.repeat(t, 2)[::2])
        for a, b in zip(fast, general, strict=True):
            np.testing.assert_array_equal(a, b)
    assert not np.array_equal(trend._slope_statistics(x, late)[1], first[1])
    assert len(trend._PRODUCTS) == 2


def test_group_covariance_reuses_the_members_own_estimate_exactly():
    # the members' variance and window taken from the estimate of all columns give
    # the covariance that estimating the members alone gives
    x = np.asfortranarray(_records(15, 9, seed=11, phi=0.8))
    V, _, M, _ = stats._mean_variance_columns(x, None, with_dof=True)
    cols = [2, 5, 6]
    alone = stats.mean_covariance(x[:, cols])
    reused = stats._mean_covariance(x[:, cols], known=(V[cols], M[cols]))
    np.testing.assert_array_equal(reused, alone)


def test_judge_shortcut_equals_numpy_nan_functions():
    df = _frame(n=40)
    run = Run.from_frame(df)
    a = judge(run, list(df.columns))
    x = df.to_numpy()
    np.testing.assert_array_equal(a["mean"], np.nanmean(x, axis=0))
    np.testing.assert_array_equal(a["std"], np.nanstd(x, axis=0, ddof=1))
    np.testing.assert_array_equal(a["min"], np.nanmin(x, axis=0))
    np.testing.assert_array_equal(a["max"], np.nanmax(x, axis=0))
    # the drift: least-squares slope times the span, the times as pandas gives them
    t = np.asarray((df.index - df.index[0]) / pd.Timedelta(seconds=1), dtype=float)
    tm = np.nanmean(np.where(np.isfinite(x), t[:, None], np.nan), axis=0)
    slope = np.nansum((t[:, None] - tm) * (x - np.nanmean(x, axis=0)), axis=0) / np.nansum(
        (t[:, None] - tm) ** 2, axis=0
    )
    np.testing.assert_array_equal(a["drift"], slope * (t[-1] - t[0]))


def test_shared_stability_limits_equal_one_call_per_tag(plant):
    run = _run(plant)
    tags = list(run.data.columns)
    means = np.array([1.0e5, 4.1e6, -3.0e6, 520.0, 50.0, 0.0])
    got, basis = permissible(run, tags, means, None)
    for j, tag in enumerate(tags):
        spec, where = permissible_spec(run, tag, None)
        assert basis[j] == where
        want = np.nan if spec is None else float(spec.limit_si(means[j]))
        np.testing.assert_array_equal(got[j], want)


def test_bad_stability_limits_name_their_tag(plant):
    # the general path for limits given as numbers or tables still names the tag
    run = _run(plant)
    tags = list(run.data.columns)
    means = np.ones(len(tags))
    with pytest.raises(InputError, match="tag 'FT-A'.*has no 'value'"):
        permissible(run, tags, means, {"FT-A": {"kind": "percent"}})
    with pytest.raises(InputError, match="tag 'PT-2'.*positive"):
        permissible(run, tags, means, {"PT-2": -1.0})
    with pytest.raises(InputError, match="tag 'TT-1'.*kind"):
        permissible(run, tags, means, {"TT-1": {"value": 1.0, "kind": "sideways"}})
    limit = {"value": 0.5, "kind": "absolute", "unit": "K"}
    got, _ = permissible(run, tags, means, {"TT-1": limit})
    assert got[tags.index("TT-1")] == 0.5


def test_trend_verdicts_equal_a_boolean_array_built_from_the_p_values():
    df = _frame(n=60)
    df["TT-1"] += np.linspace(0.0, 2.0, len(df))  # a clear trend
    run = Run.from_frame(df)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = run.trend()
    p = table["p_value"].to_numpy()
    usable = np.isfinite(p)
    m = max(int(usable.sum()), 1)
    flags = [pd.NA if not ok else bool(v < 0.05 / m) for ok, v in zip(usable, p, strict=True)]
    want = pd.array(flags, dtype="boolean")
    pd.testing.assert_extension_array_equal(table["trending"].array, want)
    assert bool(table.loc["TT-1", "trending"])


# -- times and means as pandas computes them ------------------------------------


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
def test_seconds_and_spans_equal_pandas_timedelta_arithmetic(unit):
    rng = np.random.default_rng(0)
    per_second = {"s": 1, "ms": 10**3, "us": 10**6, "ns": 10**9}[unit]
    steps = rng.integers(1, 10**6, 50) * (10**9 // per_second)
    idx = pd.DatetimeIndex(
        pd.Timestamp("2031-05-04", tz="UTC") + pd.to_timedelta(np.r_[0, np.cumsum(steps)], "ns")
    ).as_unit(unit)
    want = np.asarray((idx - idx[0]) / pd.Timedelta(seconds=1), dtype=float)
    np.testing.assert_array_equal(run_windows._seconds(idx), want)
    run = Run.from_frame(pd.DataFrame({"X": np.zeros(len(idx))}, index=idx))
    assert run_windows.duration_seconds(run) == (idx[-1] - idx[0]) / pd.Timedelta(seconds=1)


@pytest.mark.parametrize("steps", [[60.0] * 14, [60.0] * 13, [60.0, 60.0, 120.0, 60.0], [1.0, 3.0]])
def test_median_step_equals_numpy_median(steps):
    t = pd.Timestamp("2031-05-04", tz="UTC") + pd.to_timedelta(np.r_[0.0, np.cumsum(steps)], "s")
    idx = pd.DatetimeIndex(t)
    want = float(np.median(np.diff((idx - idx[0]) / pd.Timedelta(seconds=1))))
    assert run_windows.sampling_interval(idx) == want


def test_barometer_mean_equals_pandas_series_mean():
    rng = np.random.default_rng(2)
    for nan_share in (0.0, 0.3, 1.0):
        x = rng.normal(size=(101, 3)) * 1e3 + 1.0e5
        x[rng.random(x.shape) < nan_share] = np.nan
        frame = pd.DataFrame(x)
        for j in range(3):
            want = frame[j].mean()
            got = averaging._series_mean(frame.to_numpy()[:, j])
            assert got == want or (np.isnan(got) and np.isnan(want))


# -- the remembered fixed instrument uncertainties -------------------------------


def _u_systematic(run, tag):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = run.average(keep_members=True)
    return float(m[tag].u_systematic), m


def test_systematic_uncertainty_equals_the_plant_method_for_every_kind(plant):
    run = _run(plant)
    _, m = _u_systematic(run, "PT-1")
    atm = float(run.data["PB-1"].mean())
    for tag in ("PB-1", "PT-1", "PT-2", "FT-A", "FT-B"):
        spec = plant.tags[tag]
        want = float(
            spec.systematic_standard_uncertainty(
                float(m[tag].value), atmospheric_pressure=atm, unit=run.units.get(tag)
            )
        )
        assert float(m[tag].u_systematic) == want, tag


def test_fixed_uncertainty_of_another_plant_is_its_own(plant, tmp_path):
    u1, _ = _u_systematic(_run(plant), "PT-2")
    path = tmp_path / "other.toml"
    path.write_text(textwrap.dedent(PLANT).replace("value = 0.25", "value = 0.5"), encoding="utf-8")
    other = load_plant(path)
    u2, _ = _u_systematic(_run(other), "PT-2")
    # 0.5 % of the span against 0.25 %: twice the uncertainty (exact doubling of a
    # power of two apart from the conversion, within one rounding)
    assert u2 == pytest.approx(2.0 * u1, rel=1e-15)
    assert u1 != u2
    # and the first plant still gets its own
    assert _u_systematic(_run(plant), "PT-2")[0] == u1


def test_fixed_uncertainty_follows_the_unit_of_the_run(plant):
    # TT-1 has no unit in the plant: the run's unit decides what 0.3 means
    df = _frame()
    u_c, _ = _u_systematic(_run(plant, df, "degC"), "TT-1")
    u_f, _ = _u_systematic(_run(plant, df, "degF"), "TT-1")
    assert u_c == pytest.approx(0.3, rel=1e-15)  # 0.3 K: a degree Celsius interval is a kelvin
    assert u_f == pytest.approx(0.3 * 5.0 / 9.0, rel=1e-14)  # 5/9 K per Fahrenheit degree
    # the same run changed after a call gets the new unit's value
    run = _run(plant, df, "degC")
    assert _u_systematic(run, "TT-1")[0] == u_c
    run.units["TT-1"] = "degF"
    assert _u_systematic(run, "TT-1")[0] == u_f


def test_fixed_uncertainty_entry_of_another_object_is_not_used(plant, monkeypatch):
    spec = plant.tags["PT-2"]
    # an entry under this spec's id that belongs to another object (an id reused)
    monkeypatch.setitem(averaging._FIXED, (id(spec), "barg"), (object(), 123.0))
    u, _ = _u_systematic(_run(plant), "PT-2")
    assert u == float(spec.systematic_standard_uncertainty(0.0, unit="barg")) != 123.0


def test_fixed_uncertainty_of_a_replaced_tag_spec(plant):
    run = _run(plant)
    u1, _ = _u_systematic(run, "FT-A")
    old = plant.tags["FT-A"]
    plant.tags["FT-A"] = dataclasses.replace(
        old, uncertainty=dataclasses.replace(old.uncertainty, value=0.4)
    )
    u2, _ = _u_systematic(run, "FT-A")
    assert u1 == pytest.approx(0.2, rel=1e-15)  # stated as a standard uncertainty
    assert u2 == pytest.approx(0.4, rel=1e-15)


def test_mutated_run_data_gives_fresh_averages(plant):
    run = _run(plant)
    u1, m1 = _u_systematic(run, "PT-1")
    run.data = run.data * 1.1  # percent of reading: the uncertainty follows the mean
    u2, m2 = _u_systematic(run, "PT-1")
    assert float(m2["PT-1"].value) == pytest.approx(1.1 * float(m1["PT-1"].value), rel=1e-15)
    assert u2 > u1


def test_average_refuses_a_tag_named_twice(plant):
    run = _run(plant)
    with pytest.raises(InputError, match="names tag 'FT-B' more than once") as info:
        run.average(tags=["FT-A", "FT-B", "PT-1", "FT-B"])
    assert info.value.tag == "FT-B"


# -- the remembered column labels ------------------------------------------------


def test_column_labels_follow_a_renamed_frame():
    df = _frame()
    run = Run.from_frame(df)
    assert run.tags == tuple(df.columns)
    assert column_list(run.data.columns) == list(df.columns)
    renamed = [f"X-{j}" for j in range(df.shape[1])]
    run.data = run.data.set_axis(renamed, axis=1)
    run.mask = run.mask.set_axis(renamed, axis=1)
    assert run.tags == tuple(renamed)
    assert list(run.average(trend=False).tags) == renamed[:4] + renamed[4:]
    # a list handed out is the caller's to change
    labels = column_list(run.data.columns)
    labels.append("Y")
    assert column_list(run.data.columns) == renamed
