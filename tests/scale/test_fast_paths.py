"""The shortcuts of reconcile_many's window loop against the general calls they stand for.

Outside checks: each shortcut is compared, value for value, with the general
library call it replaces (``Run.window``, ``Run.stability``, ``evaluate``,
``PlantModel.bind``) and, for the sampling interval, with the plain pandas
formula ``median(diff((t - t0) / 1 s))``.  Data: the invented Brackenfold demo.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import perftest
from perftest.balance.plant_elimination import bound
from perftest.evaluation.results import evaluate, results_only
from perftest.plant.equations import build_model
from perftest.run.stability import judge
from perftest.run.windows import sampling_interval
from perftest.scale.windows import _cut, _Cutter, _window_coverage

DEMO = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"


@pytest.fixture(scope="module")
def demo():
    plant = perftest.load_plant(DEMO / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant)
    return plant, run


def _gappy(run):
    """The demo run with 20 minutes of samples masked on every tag and a few cells masked."""
    mask = run.mask.copy()
    idx = run.data.index
    gap = (idx >= idx[0] + pd.Timedelta("40min")) & (idx < idx[0] + pd.Timedelta("60min"))
    mask.loc[gap, :] = True
    mask.iloc[5, 2] = mask.iloc[7, 0] = True
    return run._replace(data=run.data.mask(mask), mask=mask)


def _windows(run):
    t0 = run.data.index[0].floor("15min")
    starts = [t0 + k * pd.Timedelta("15min") for k in range(-2, 20)]
    out = [(s, s + pd.Timedelta("15min")) for s in starts]
    # odd bounds: off the sampling grid, one sample long, past the end
    out += [(t0 + pd.Timedelta("7min 30s"), t0 + pd.Timedelta("31min 10s"))]
    out += [(run.data.index[3], run.data.index[4])]
    out += [(run.data.index[-5], run.data.index[-1] + pd.Timedelta("2h"))]
    return out


@pytest.mark.parametrize("gappy", [False, True])
def test_cutter_equals_run_window(demo, gappy):
    plant, run = demo
    run = _gappy(run) if gappy else run
    cutter = _Cutter(run)
    assert cutter.fast  # the demo run holds Run's own attributes only
    seen = 0
    for start, end in _windows(run):
        got, share = cutter(start, end)
        want = _cut(run, start, end, lean=False)
        if want is None:
            assert got is None
            continue
        seen += 1
        pd.testing.assert_frame_equal(got.data, want.data)
        pd.testing.assert_frame_equal(got.mask, want.mask)
        pd.testing.assert_frame_equal(got.exclusions, want.exclusions)
        assert got.log == want.log
        assert (got.start, got.end) == (want.start, want.end)
        assert (got.units, got.quantities, got.plant) == (want.units, want.quantities, want.plant)
        assert share == _window_coverage(want)  # the same float, not just close
    assert seen >= 15


def test_judge_equals_the_stability_table(demo):
    plant, run = demo
    w = run.window(run.data.index[0], run.data.index[0] + pd.Timedelta("15min"))
    tags = list(w.data.columns)
    table = w.stability(warn=False)
    got = judge(w, tags)
    for col in ("n", "mean", "std", "max_deviation", "drift", "permissible", "ratio"):
        np.testing.assert_array_equal(np.asarray(got[col], float), table[col].to_numpy(float))
    assert list(got["passed"]) == list(table["passed"])
    assert list(got["basis"]) == list(table["basis"])


def test_results_only_gives_the_same_results(demo):
    plant, run = demo
    w = run.window(run.data.index[0], run.data.index[0] + pd.Timedelta("15min"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rec = perftest.reconcile(plant, w.average(), eliminate=True)
        full = evaluate(plant, rec, monte_carlo=False, detail=False)
        with results_only():
            bare = evaluate(plant, rec, monte_carlo=False, detail=False)
        after = evaluate(plant, rec, monte_carlo=False, detail=False)
    pd.testing.assert_frame_equal(bare.results, full.results)
    pd.testing.assert_frame_equal(bare.cov, full.cov)
    assert len(full.guarantees) and len(full.corrections)  # the demo has both
    assert bare.guarantees.empty and bare.corrections.empty and bare.inputs.empty
    # the switch ends with the block
    pd.testing.assert_frame_equal(after.guarantees, full.guarantees)


@pytest.mark.parametrize("unit", ["s", "ms", "us", "ns"])
def test_sampling_interval_is_the_pandas_formula(unit):
    rng = np.random.default_rng(3)
    for span_s in (1e3, 1e7, 3e8):  # up to about 10 years: ns counts beyond 2**53
        ns = np.sort(rng.integers(0, int(span_s * 1e9), 400))
        times = pd.DatetimeIndex(ns.astype("datetime64[ns]"), tz="UTC").as_unit(unit)
        step = (times - times[0]) / pd.Timedelta(seconds=1)
        want = float(np.median(np.diff(np.asarray(step, dtype=float))))
        assert sampling_interval(times) == want  # the same float


def test_bound_reuses_a_binding(demo):
    plant, _ = demo
    model = build_model(plant)
    tags = list(model.measured)[:-1]
    a, b = bound(model, tags), bound(model, tuple(tags))
    assert a is b
    fresh = model.bind(tags)
    assert (a.measured, a.unmeasured) == (fresh.measured, fresh.unmeasured)
    assert bound(model, list(model.measured)[1:]) is not a
