"""The short ways of evaluate: the per-plant memo, the quick tables and quantiles.

Every short way must give what the long way gives.  The references here are the
long ways themselves (the ``pandas.DataFrame`` constructor, ``scipy.stats.t.ppf``
through :func:`perftest.run.stats.coverage_factor`, a freshly loaded plant file,
the model evaluated one point at a time), so equality is asked for exactly, bit
for bit, unless a comment says otherwise.  The stale-data tests change a plant
after a first evaluation and check that the second one follows the change.
"""

from __future__ import annotations

import copy
import textwrap

import numpy as np
import pandas as pd
import pytest
from standin import StandIn

from perftest.errors import InputError, PerftestError, PlantFileError
from perftest.evaluation import memo as memo_module
from perftest.evaluation import performance as perf
from perftest.evaluation import results as results_module
from perftest.evaluation.budgets import _coverage_factors
from perftest.evaluation.corrections import CorrectionCurve
from perftest.evaluation.frames import ResultsLayout, empty_frame, results_frame
from perftest.evaluation.linear_inputs import input_dof, input_dofs
from perftest.evaluation.results import evaluate, results_only
from perftest.plant.file import load_plant
from perftest.run.stats import coverage_factor

PLANT = """
[site]
name = "Memo bench"
atmospheric_pressure = { value = 101.325, unit = "kPa" }

[tags.JT-1]
unit = "MW"
[tags.JT-2]
unit = "MW"
[tags.FT-F]
unit = "kg/s"
[tags.TT-S]
unit = "K"
[tags.TT-K]
unit = "K"

[performance]
gross_power = "JT-1"
auxiliary_power = "JT-2"
heat_input = "fuel"
source_temperature = "TT-S"
sink_temperature = "TT-K"

[fuel]
mass_flow = "FT-F"
lhv = { value = 50.0, unit = "MJ/kg" }
uncertainty = { value = 0.5, kind = "percent", level = "standard" }
exergy_ratio = 1.04

[[corrections]]
result = "net_power"
variable = "TT-K"
reference = { value = 290.0, unit = "K" }
kind = "multiplicative"
curve = { x = [280.0, 290.0, 305.0, 315.0], y = [1.01, 1.0, 0.97, 0.95], x_unit = "K" }

[[guarantees]]
quantity = "corrected_net_power"
value = 29.0
unit = "MW"
direction = "at_least"
"""

VALUES = {"JT-1": 30e6, "JT-2": 0.5e6, "FT-F": 2.0, "TT-S": 600.0, "TT-K": 300.0}
U = {"JT-1": 0.09e6, "JT-2": 1e3, "FT-F": 0.01, "TT-S": 1.0, "TT-K": 0.1}


def _plant(tmp_path, text: str = PLANT, name: str = "plant.toml"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_plant(path)


def _rec(**changes):
    values = dict(VALUES, **changes)
    return StandIn(values, U)


def _same_frame(a: pd.DataFrame, b: pd.DataFrame) -> None:
    """Equal to the bit: values, dtypes, index, columns and their names."""
    pd.testing.assert_frame_equal(a, b, check_exact=True)
    assert list(a.dtypes) == list(b.dtypes)
    assert a.index.names == b.index.names and a.columns.names == b.columns.names
    assert type(a.index) is type(b.index) and type(a.columns) is type(b.columns)


def _same(p, q) -> None:
    """Two evaluations give the same tables (exactly)."""
    _same_frame(p.results, q.results)
    _same_frame(p.cov, q.cov)
    _same_frame(p.corrections, q.corrections)
    _same_frame(p.guarantees, q.guarantees)
    _same_frame(p.inputs, q.inputs)
    assert p.notes == q.notes


@pytest.fixture(autouse=True)
def _fresh_memo():
    memo_module.clear()
    yield
    memo_module.clear()


# --------------------------------------------------------------------------- memo


def test_second_call_equals_the_first_and_a_freshly_loaded_plant(tmp_path):
    plant = _plant(tmp_path)
    first = evaluate(plant, _rec(), monte_carlo=False)
    again = evaluate(plant, _rec(), monte_carlo=False)  # from the memo
    fresh = evaluate(_plant(tmp_path, name="other.toml"), _rec(), monte_carlo=False)
    _same(first, again)
    _same(first, fresh)
    assert memo_module.plant_memo(plant) is not None


@pytest.mark.parametrize(
    "edit, result",
    [
        # the correction curve: the corrected net power follows the new factor
        (
            lambda s: s["corrections"][0]["curve"].update(y=[1.02, 1.0, 0.96, 0.93]),
            "corrected_net_power",
        ),
        # the heating value: heat input, efficiency and heat rate change
        (lambda s: s["fuel"].update(lhv={"value": 48.0, "unit": "MJ/kg"}), "heat_input"),
        # the stated heating-value uncertainty: u of the heat input changes
        (lambda s: s["fuel"]["uncertainty"].update(value=1.5), "heat_input"),
        # no auxiliary power any more: net power changes
        (lambda s: s["performance"].pop("auxiliary_power"), "net_power"),
    ],
)
def test_a_plant_edited_in_place_is_not_served_stale_values(tmp_path, edit, result):
    plant = _plant(tmp_path)
    before = evaluate(plant, _rec(), monte_carlo=False)
    edit(plant.sections)
    after = evaluate(plant, _rec(), monte_carlo=False)
    # the reference: a plant object made with the edited tables and no memo
    other = _plant(tmp_path, name="other.toml")
    object.__setattr__(other, "sections", copy.deepcopy(plant.sections))
    memo_module.clear()
    expected = evaluate(other, _rec(), monte_carlo=False)
    _same(after, expected)
    changed = [
        not np.array_equal(before.results.loc[result, c], after.results.loc[result, c])
        for c in ("value", "u")
    ]
    assert any(changed), "the edit must change the result, or the test proves nothing"


def test_each_plant_object_has_its_own_memo(tmp_path):
    a = _plant(tmp_path)
    b = _plant(tmp_path, PLANT.replace("value = 50.0", "value = 45.0"), name="b.toml")
    ra = evaluate(a, _rec(), monte_carlo=False)
    rb = evaluate(b, _rec(), monte_carlo=False)
    assert ra.value("heat_input") == pytest.approx(100e6, rel=1e-12)  # 2 kg/s * 50 MJ/kg
    assert rb.value("heat_input") == pytest.approx(90e6, rel=1e-12)  # 2 kg/s * 45 MJ/kg
    # and again, in the other order
    assert evaluate(b, _rec(), monte_carlo=False).value("heat_input") == rb.value("heat_input")
    assert evaluate(a, _rec(), monte_carlo=False).value("heat_input") == ra.value("heat_input")


def test_a_replaced_site_is_not_served_stale_values(tmp_path):
    # gauge pressures in the plant tables are read with the site's atmospheric pressure;
    # a new site (dataclasses.replace on a frozen plant gives a new object; this is the
    # same object with a new site) must not meet the old memo
    plant = _plant(tmp_path)
    memo = memo_module.plant_memo(plant)
    assert memo is not None and memo.matches(plant)
    site = plant.site
    object.__setattr__(plant, "site", type(site)(name="Another bench"))
    assert not memo.matches(plant)
    assert memo_module.plant_memo(plant) is not memo


def test_errors_are_not_kept(tmp_path):
    # a guarantee of a result the plant does not have: refused on every call
    bad = PLANT.replace('quantity = "corrected_net_power"', 'quantity = "cop"')
    plant = _plant(tmp_path, bad)
    for _ in range(2):
        with pytest.raises(PlantFileError, match="is not a result of this plant"):
            evaluate(plant, _rec(), monte_carlo=False)
    # a plant made bad after a good evaluation is refused as well
    good = _plant(tmp_path, name="good.toml")
    evaluate(good, _rec(), monte_carlo=False)
    good.sections["fuel"]["uncertainty"] = "half a percent"
    with pytest.raises(PlantFileError, match="uncertainty"):
        evaluate(good, _rec(), monte_carlo=False)


def test_a_reconciliation_error_comes_in_its_place(tmp_path):
    # the memo keeps plant-file work only: an unobservable input is refused per call
    plant = _plant(tmp_path)
    evaluate(plant, _rec(), monte_carlo=False)
    with pytest.raises(PerftestError, match="not observable"):
        evaluate(plant, _rec(**{"FT-F": float("nan")}), monte_carlo=False)


def test_plants_whose_tables_do_not_compare_get_no_memo(tmp_path):
    plant = _plant(tmp_path)
    plant.sections["note"] = np.array([1.0, 2.0])  # == of arrays is no verdict
    assert memo_module.plant_memo(plant) is None
    # and the evaluation still works, from the plant file each time
    evaluate(plant, _rec(), monte_carlo=False)


def test_returned_tables_do_not_share_mutable_parts(tmp_path):
    plant = _plant(tmp_path)
    with results_only():
        first = evaluate(plant, _rec(), monte_carlo=False)
        first.results.loc["net_power", "unit"] = "MW"
        first.results.loc["net_power", "description"] = "edited"
        first.results.index.name = "edited"
        first.cov.index.name = "edited"
        first.inputs["added"] = []
        first.corrections.index.name = "edited"
        second = evaluate(plant, _rec(), monte_carlo=False)
    assert second.results.loc["net_power", "unit"] == "W"
    assert second.results.loc["net_power", "description"] == "Net power (gross - auxiliary)"
    assert second.results.index.name == "name"
    assert second.cov.index.name is None
    assert second.inputs.shape == (0, 0) and second.corrections.index.name is None


# --------------------------------------------------------------------------- tables


@pytest.mark.parametrize("m", [1, 3, 24])
def test_quick_results_table_equals_the_constructor(m):
    names = [f"r{i}" for i in range(m)]
    units = ["W", "1", "K"] * m
    desc = [f"Result {i}, corrected" for i in range(m)]
    bases = ["lhv" if i % 2 else "" for i in range(m)]
    layout = ResultsLayout(names, units[:m], desc, bases)
    rng = np.random.default_rng(m)
    numbers = [rng.normal(size=m) for _ in range(5)]
    numbers[4][0] = np.inf  # an infinite dof
    _same_frame(layout.frame(*numbers), results_frame(names, *numbers, units[:m], desc, bases))
    cov = rng.normal(size=(m, m))
    _same_frame(layout.square(cov), pd.DataFrame(cov, index=names, columns=names))


def test_results_table_of_other_numbers_falls_back_to_the_constructor():
    layout = ResultsLayout(["a", "b"], ["W", "W"], ["A", "B"], ["", ""])
    ints = [np.array([1, 2])] * 5  # integers: the constructor keeps their dtype
    _same_frame(layout.frame(*ints), results_frame(["a", "b"], *ints, ["W"] * 2, "AB", ["", ""]))


def test_empty_frames_are_new_empty_frames():
    a, b = empty_frame(), empty_frame()
    _same_frame(a, pd.DataFrame())
    a["x"] = [1.0] * 0
    a.index.name = "edited"
    _same_frame(b, pd.DataFrame())
    _same_frame(empty_frame(), pd.DataFrame())


# --------------------------------------------------------------------------- numbers


@pytest.mark.parametrize("level", [0.5, 0.6827, 0.9, 0.95, 0.99, 0.9973])
def test_coverage_factors_equal_scipy_t_ppf_bit_for_bit(level):
    rng = np.random.default_rng(7)
    dof = np.concatenate(
        [rng.uniform(0.5, 5.0, 50), rng.uniform(5.0, 1e3, 50), 10 ** rng.uniform(3, 9, 50)]
    )
    dof[::17] = np.inf
    ours = _coverage_factors(dof, level)
    ref = np.atleast_1d(np.asarray(coverage_factor(dof, level), dtype=float))
    assert ours.dtype == ref.dtype and ours.shape == ref.shape
    assert np.array_equal(ours, ref)


def test_coverage_factors_refuse_what_coverage_factor_refuses():
    for dof, level in (([3.0, np.nan], 0.95), ([3.0, 0.0], 0.95), ([3.0], 1.5)):
        with pytest.raises(InputError) as ours:
            _coverage_factors(np.array(dof), level)
        with pytest.raises(InputError) as ref:
            coverage_factor(np.array(dof), level)
        assert str(ours.value) == str(ref.value)


@pytest.mark.parametrize(
    "call",
    [
        lambda a: perf.carnot_efficiency(a(290.0), a(300.0)),
        lambda a: perf.carnot_efficiency(a(-5.0), a(300.0)),
        lambda a: perf.curzon_ahlborn_efficiency(a(600.0), a(0.0)),
        lambda a: perf.first_law_efficiency(a(1.0), a(-2.0)),
        lambda a: perf.heat_rate(a(1.0), a(0.0)),
        lambda a: perf.second_law_efficiency(a(0.3), a(1.5)),
        lambda a: perf.carnot_cop_refrigeration(a(300.0), a(280.0)),
    ],
)
def test_one_number_checks_refuse_as_the_array_checks(call):
    # the message of a refused number is the one of a one-element array
    with pytest.raises(InputError) as one:
        call(np.float64)
    with pytest.raises(InputError) as arr:
        call(lambda v: np.array([v]))
    assert str(one.value) == str(arr.value)


def test_one_number_checks_let_nan_through_as_the_array_checks():
    assert np.isnan(perf.carnot_efficiency(np.nan, 300.0))
    assert np.isnan(perf.carnot_efficiency(np.array([np.nan]), np.array([300.0]))[0])


def test_curve_out_of_range_same_message_for_a_number_and_an_array():
    c = CorrectionCurve("T", x=[280.0, 300.0], y=[1.01, 0.99], reference=290.0)
    with pytest.raises(InputError) as one:
        c(np.float64(310.0))
    with pytest.raises(InputError) as arr:
        c(np.array([290.0, 310.0]))
    assert str(one.value) == str(arr.value)
    assert np.isnan(c(np.nan))  # NaN passes the range check, both ways
    assert np.isnan(c(np.array([np.nan]))[0])


def test_input_dofs_equal_the_per_name_rule(tmp_path):
    class Meas:
        tags = ("JT-1", "FT-F", "JT-1")
        dof = [12.0, 0.0, 3.0]

    class Source:
        def __init__(self, kind, tag=None):
            self.kind, self.tag = kind, tag

    class Model:
        sources = {"s.mass_flow": Source("measured", "FT-F"), "s.pressure": Source("fixed")}

    rec = StandIn(VALUES, U)
    rec.measurements, rec.model = Meas(), Model()
    names = ["JT-1", "FT-F", "s.mass_flow", "s.pressure", "fuel.lhv", "boiler.heat"]
    want = [input_dof(rec, n) for n in names]
    assert list(input_dofs(rec, names)) == want
    assert want == [12.0, np.inf, np.inf, np.inf, np.inf, 3.0]  # 0 dof counts as exact


def test_one_vectorised_call_gives_the_results_of_one_point_at_a_time(tmp_path, monkeypatch):
    plant = _plant(tmp_path)
    rec = _rec(**{"TT-K": 297.3})
    quick = evaluate(plant, rec)  # Monte Carlo and budgets too
    monkeypatch.setattr(results_module, "_results_at_points", lambda *a: [])
    memo_module.clear()
    slow = evaluate(plant, rec)
    _same(quick, slow)
    _same_frame(quick.monte_carlo, slow.monte_carlo)
    for name, budget in quick.budgets.items():
        _same_frame(budget, slow.budgets[name])


def test_the_errors_of_one_point_at_a_time_are_kept(tmp_path, monkeypatch):
    # the condition at x is inside the curve, a difference point is not: the single
    # vectorised call fails and the point-by-point sequence raises its own error
    plant = _plant(tmp_path)
    rec = _rec(**{"TT-K": 315.0 - 1e-6})
    with pytest.raises(InputError) as quick:
        evaluate(plant, rec, monte_carlo=False)
    monkeypatch.setattr(results_module, "_results_at_points", lambda *a: [])
    with pytest.raises(InputError) as slow:
        evaluate(plant, rec, monte_carlo=False)
    assert "outside the curve's range" in str(quick.value)
    assert str(quick.value) == str(slow.value)


def test_floating_point_warnings_come_as_one_point_at_a_time(tmp_path, monkeypatch):
    # zero net power: heat rate divides by zero.  The warnings (and the error that
    # follows) must be those of the point-by-point sequence.
    plant = _plant(tmp_path)
    rec = _rec(**{"JT-2": VALUES["JT-1"]})

    def run():
        with pytest.warns(RuntimeWarning) as record, pytest.raises(PerftestError) as err:
            evaluate(plant, rec, monte_carlo=False)
        return [str(w.message) for w in record], str(err.value)

    quick = run()
    monkeypatch.setattr(results_module, "_results_at_points", lambda *a: [])
    assert quick == run()


def test_budget_frames_equal_the_rows_of_the_long_budget_table():
    from perftest.evaluation.frames import BUDGET_COLUMNS, budget_frames
    from perftest.evaluation.propagation import propagate_linear

    rng = np.random.default_rng(3)
    m, n = 5, 7
    s = rng.normal(size=(m, n))
    s[:, 2] = 0.0  # an input no output uses
    s[1, 4] = 0.0
    s[3, :] = 0.0  # an output with zero variance: its shares are NaN
    a = rng.normal(size=(n, n))
    inputs = [f"in{i}" for i in range(n)]
    outputs = [f"out{k}" for k in range(m)]
    prop = propagate_linear(
        s, a @ a.T, x=rng.normal(size=n), names=inputs, output_names=outputs,
        dof=[4.0, 9.0, np.inf, 12.0, 30.0, np.inf, 7.0],
    )  # fmt: skip
    droppable = [False, True, True, False, True, False, False]
    quick = budget_frames(prop, outputs, droppable)
    assert list(quick) == outputs
    for o in outputs:
        b = prop.budget_for(o)[list(BUDGET_COLUMNS)]
        unused = [i for i in b.index if droppable[inputs.index(i)] and b.loc[i, "sensitivity"] == 0]
        _same_frame(quick[o], b.drop(index=unused).copy())
    assert "in2" not in quick["out0"].index and "in4" not in quick["out1"].index
    assert "in4" in quick["out0"].index


@pytest.mark.parametrize("interval", ["shortest", "symmetric"])
@pytest.mark.parametrize("M", [2, 3, 10, 101, 4000])
def test_monte_carlo_interval_from_the_tails_equals_the_full_sort(interval, M):
    from perftest.evaluation.montecarlo import _coverage, _coverage_of_samples

    rng = np.random.default_rng(M)
    ys = np.concatenate(
        [
            rng.normal(size=(2, M)),
            rng.lognormal(size=(1, M)),  # skewed: the shortest interval is off-centre
            rng.integers(0, 5, size=(1, M)).astype(float),  # many ties
        ]
    )
    for level in (0.3, 0.5, 0.68, 0.9, 0.95, 0.99):
        ours = _coverage_of_samples(ys, level, interval)
        ref = _coverage(np.sort(ys, axis=1), level, interval)
        assert np.array_equal(ours[0], ref[0]) and np.array_equal(ours[1], ref[1])
