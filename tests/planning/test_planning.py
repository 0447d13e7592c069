"""perftest.planning.prediction: pre-test uncertainty prediction.

Outside checks:

* the effective number of samples of an AR(1) series against a numpy Monte Carlo
  of the variance of the mean (Box, Jenkins and Reinsel, Time Series Analysis,
  Sect. 3.2, from memory);
* the gain of the reconciliation on one raw measurement against a finite
  difference through ``perftest.reconcile`` (an independent, nonlinear method);
* shares and what-if without reconciliation against the GUM law of propagation
  written out by hand (JCGM 100:2008, Eq. 10);
* the predicted uncertainty against the spread actually obtained from simulated
  test runs through the real pipeline (Run -> average -> reconcile -> evaluate),
  noise drawn from the same instrument uncertainties (JCGM 101:2008 idea:
  propagation of distributions by sampling).

The bench plant below is invented test data: a back-pressure turbine with one
redundant energy balance (generator output vs steam flow and enthalpy drop).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest

import perftest
from perftest.errors import InputError, PlantFileError, ReconciliationWarning
from perftest.planning.prediction import effective_samples, plan, planned_measurements, read_design
from perftest.plant.file import load_plant

CoolProp = pytest.importorskip("CoolProp.CoolProp")

# Design point: 40 bar / 400 degC steam expanded to 5 bar with an isentropic
# efficiency of 0.80, 10 kg/s, generator losses 1.5 % of the output.
P1, T1, P2, ETA, FLOW, LOSS = 40e5, 673.15, 5e5, 0.80, 10.0, 0.015


def _design_point():
    w = CoolProp.AbstractState("IF97", "Water")
    w.update(CoolProp.PT_INPUTS, P1, T1)
    h1, s1 = w.hmass(), w.smass()
    w.update(CoolProp.PSmass_INPUTS, P2, s1)
    h2 = h1 - ETA * (h1 - w.hmass())
    w.update(CoolProp.HmassP_INPUTS, h2, P2)
    power = FLOW * (h1 - h2) / (1 + LOSS)
    return w.T(), power


T2, POWER = _design_point()
FUEL = POWER / 0.35 / 50e6  # kg/s of a 50 MJ/kg fuel at 35 % gross efficiency

PLANT = f"""
[site]
name = "Bench turbine"
atmospheric_pressure = {{ value = 101.325, unit = "kPa" }}

[tags.FT-1]
unit = "kg/s"
uncertainty = {{ value = 0.5, kind = "percent_of_reading", level = 0.95 }}
[tags.PT-1]
unit = "bar"
uncertainty = {{ value = 0.2, kind = "percent_of_reading", level = 0.95 }}
[tags.TT-1]
unit = "degC"
uncertainty = {{ value = 0.5, kind = "absolute", level = 0.95 }}
[tags.PT-2]
unit = "bar"
uncertainty = {{ value = 0.2, kind = "percent_of_reading", level = 0.95 }}
[tags.TT-2]
unit = "degC"
uncertainty = {{ value = 0.5, kind = "absolute", level = 0.95 }}
[tags.JT-1]
unit = "MW"
uncertainty = {{ value = 1.5, kind = "percent_of_reading", level = 0.95 }}
[tags.JT-2]
unit = "MW"
uncertainty = {{ value = 2.0, kind = "percent_of_reading", level = 0.95 }}
[tags.FT-F]
unit = "kg/s"
uncertainty = {{ value = 0.8, kind = "percent_of_reading", level = 0.95 }}
[tags.TT-K]
unit = "degC"
uncertainty = {{ value = 0.2, kind = "absolute", level = 0.95 }}

[streams.steam_in]
fluid = "water"
phase = "vapour"
mass_flow = "FT-1"
pressure = "PT-1"
temperature = "TT-1"

[streams.steam_out]
fluid = "water"
phase = "vapour"
pressure = "PT-2"
temperature = "TT-2"

[units.turbine]
type = "turbine"
inlets = ["steam_in"]
outlets = ["steam_out"]

[units.generator]
type = "generator"
shaft = "turbine"
power = "JT-1"
losses = {{ value = {LOSS * 100}, kind = "percent" }}

[fuel]
mass_flow = "FT-F"
lhv = {{ value = 50.0, unit = "MJ/kg" }}
uncertainty = {{ value = 0.5, kind = "percent", level = 0.95 }}

[performance]
gross_power = "JT-1"
auxiliary_power = "JT-2"
heat_input = "fuel"
source_temperature = "steam_in.temperature"
sink_temperature = "TT-K"

[[corrections]]
result = "net_power"
variable = "TT-K"
reference = {{ value = 15.0, unit = "degC" }}
kind = "multiplicative"
curve = {{ x = [5.0, 15.0, 25.0, 35.0], y = [1.01, 1.0, 0.985, 0.965], x_unit = "degC" }}

[design]
duration = "20min"
interval = "1min"

[design.tags]
"FT-1" = {{ value = {FLOW}, scatter = 0.05 }}
"PT-1" = {{ value = {P1 / 1e5}, scatter = 0.1 }}
"TT-1" = {{ value = {T1 - 273.15!r}, scatter = 0.5 }}
"PT-2" = {{ value = {P2 / 1e5}, scatter = 0.01 }}
"TT-2" = {{ value = {T2 - 273.15!r}, scatter = 0.5 }}
"JT-1" = {{ value = {POWER / 1e6!r}, scatter = 0.05 }}
"JT-2" = {{ value = 0.3, scatter = 0.002 }}
"FT-F" = {{ value = {FUEL!r}, scatter = 0.002 }}
"TT-K" = {{ value = 21.0, scatter = 0.1 }}

[design.allowed]
corrected_net_power = {{ value = 1.0, kind = "percent" }}
heat_rate = {{ value = 30, unit = "kJ/kWh" }}
"""


def _write(tmp_path, text=PLANT, name="plant.toml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def bench(tmp_path_factory):
    path = _write(tmp_path_factory.mktemp("bench"))
    plant = load_plant(path)
    return plant, plan(plant, upgrade_factor=0.5)


# Coverage factor of a stated 95 % uncertainty: normal distribution, two-sided
# (GUM G.1.3, Table G.1: k = 1.960 for 95 %).
K95 = 1.959963984540054


def _u_s(tag_pct: float, value: float) -> float:
    """Standard uncertainty of a percent-of-reading instrument stated at 95 %."""
    return tag_pct / 100.0 * value / K95


# --------------------------------------------------------------------------- samples


def test_effective_samples_against_monte_carlo_of_ar1_means():
    # AR(1) noise with rho = exp(-dt/tau); the variance of the mean of n samples is
    # sigma^2 / n_eff.  10 000 series estimate the variance to sqrt(2/1e4) = 1.4 %;
    # 6 % is four standard errors.
    dt, tau, n = 60.0, 120.0, 40
    rho = math.exp(-dt / tau)
    rng = np.random.default_rng(11)
    m = 10_000
    x = np.empty((m, n))
    x[:, 0] = rng.standard_normal(m)
    e = rng.standard_normal((m, n)) * math.sqrt(1 - rho**2)
    for i in range(1, n):
        x[:, i] = rho * x[:, i - 1] + e[:, i]
    var_mean = x.mean(axis=1).var(ddof=1)
    n_got, n_eff = effective_samples(n * dt, dt, tau)
    assert n_got == n
    assert 1.0 / n_eff == pytest.approx(var_mean, rel=0.06)
    # independent samples: n_eff = n exactly
    assert effective_samples(7200.0, 60.0) == (120, 120.0)


# --------------------------------------------------------------------------- design table


def test_planned_measurements_follow_the_instrument_list(bench):
    plant, tp = bench
    m = planned_measurements(plant)
    # JT-1: 1.5 % of reading at 95 %; scatter 0.05 MW over 20 independent samples.
    i = m.index("JT-1")
    assert m.u_systematic[i] == pytest.approx(_u_s(1.5, POWER), rel=1e-9)
    assert m.u_random[i] == pytest.approx(0.05e6 / math.sqrt(20), rel=1e-9)
    # degC design value converted to K; 0.5 K absolute at 95 %
    j = m.index("TT-1")
    assert m.value[j] == pytest.approx(T1, abs=1e-9)
    assert m.u_systematic[j] == pytest.approx(0.5 / K95, rel=1e-9)
    assert tp.duration == 1200.0


@pytest.mark.parametrize(
    ("old", "new", "match", "line_of"),
    [
        ("[design]\n", "[designs]\n", "unknown top-level table 'designs'", "[designs]"),
        ('"JT-2" = { value = 0.3, scatter = 0.002 }\n', "", r"no design value for tag\(s\) JT-2",
         "[design.tags]"),
        ('"JT-2" = { value = 0.3, scatter = 0.002 }', '"JT-2" = { value = "high" }',
         "'value' of tag 'JT-2' must be a finite number", '"JT-2" = { value = "high" }'),
        ('"JT-2" = { value = 0.3, scatter = 0.002 }', '"JT-2" = { value = 0.3, noise = 1 }',
         "unknown key 'noise'", '"JT-2" = { value = 0.3, noise = 1 }'),
        ('"JT-2" = { value = 0.3, scatter = 0.002 }', '"JT-9" = { value = 0.3 }',
         "'JT-9' under \\[design.tags\\] is not a tag", '"JT-9" = { value = 0.3 }'),
        ('duration = "20min"', 'duration = "twenty"', "'duration' must be a duration",
         'duration = "twenty"'),
        ('heat_rate = { value = 30, unit = "kJ/kWh" }', "heat_rat = { value = 30 }",
         "'heat_rat' is not a predicted result", "heat_rat = { value = 30 }"),
    ],
)  # fmt: skip
def test_bad_design_tables_name_key_and_line(tmp_path, old, new, match, line_of):
    text = PLANT.replace(old, new)
    assert text != PLANT
    path = _write(tmp_path, text)
    line = text.splitlines().index(line_of) + 1 if line_of in text.splitlines() else None
    with pytest.raises(PlantFileError, match=match) as info:
        plan(load_plant(path), what_if=False)
    assert info.value.line == line, str(info.value)
    assert "plant.toml" in str(info.value)


def test_missing_design_table_and_bad_arguments(tmp_path):
    text = PLANT[: PLANT.index("[design]")]
    with pytest.raises(PlantFileError, match=r"needs a \[design\] table"):
        plan(load_plant(_write(tmp_path, text)))
    plant = load_plant(_write(tmp_path, PLANT, "ok.toml"))
    with pytest.raises(InputError, match="'duration' parameter of plan"):
        plan(plant, duration="2 fortnights", what_if=False)
    with pytest.raises(InputError, match="'upgrade_factor' parameter of plan"):
        plan(plant, upgrade_factor=-1, what_if=False)


def test_duration_and_interval_arguments_shrink_the_random_part(bench):
    plant, tp = bench
    longer = read_design(plant, duration="80min", interval="30s")
    assert longer.duration == 4800.0 and set(longer.interval.values()) == {30.0}
    m = planned_measurements(plant, longer)
    # 160 samples instead of 20: the random part shrinks by sqrt(8)
    i = m.index("JT-1")
    assert m.u_random[i] == pytest.approx(0.05e6 / math.sqrt(160), rel=1e-9)


# --------------------------------------------------------------------------- prediction


def test_gain_against_finite_difference_reconciliation(bench):
    """The share split rests on G = Cov(z, x_hat) V^-1; check one column of it by
    moving one raw measurement and reconciling again (nonlinear solver)."""
    plant, tp = bench
    m = tp.measurements
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ReconciliationWarning)
        base = perftest.reconcile(plant, m)
        i = m.index("FT-1")
        step = 0.1 * math.sqrt(m.cov[i, i])
        value = np.array(m.value, dtype=float)
        value[i] += step
        moved = perftest.reconcile(plant, type(m).from_values(m.tags, value, cov=m.cov))
    fd = (moved.value("JT-1") - base.value("JT-1")) / step
    names = ["JT-1", *m.tags]
    C = base.covariance(names)
    gain = np.linalg.solve(np.asarray(m.cov), C[0, 1:])[i]
    # The balance is nonlinear in the enthalpies only weakly over 0.1 u: 1e-3 relative.
    assert gain == pytest.approx(fd, rel=1e-3)
    # and the shares of gross power with reconciliation add up to one
    r = tp.ranking("gross_power")
    assert r["share"].sum() == pytest.approx(1.0, abs=1e-9)


def test_without_reconciliation_matches_gum_by_hand(bench):
    plant, tp = bench
    # Gross power as measured is JT-1 alone: u^2 = u_s^2 + u_r^2 (GUM Eq. 10, one input).
    us, ur = _u_s(1.5, POWER), 0.05e6 / math.sqrt(20)
    assert tp.results.loc["gross_power", "u_without"] == pytest.approx(math.hypot(us, ur), 1e-6)
    share = tp.ranking("gross_power", reconciled=False)
    assert share.loc["JT-1", "systematic"] == pytest.approx(us**2 / (us**2 + ur**2), rel=1e-6)
    assert share.loc["JT-1", "random"] == pytest.approx(ur**2 / (us**2 + ur**2), rel=1e-6)
    # What-if without reconciliation: systematic part halved, random part kept.
    w = tp.what_if.set_index(["instrument", "result"]).loc[("JT-1", "gross_power")]
    assert w["U95_without_upgraded"] == pytest.approx(K95 * math.hypot(0.5 * us, ur), rel=1e-9)
    # Reconciliation helps gross power here: the turbine balance is an independent
    # estimate of the output.  A weighted mean of two estimates is better than either.
    assert tp.results.loc["gross_power", "ratio"] < 0.9
    assert (tp.results["U95_with"] <= tp.results["U95_without"] * (1 + 1e-9)).all()


def test_what_if_with_reconciliation_is_a_fresh_plan(bench, tmp_path):
    plant, tp = bench
    # Halving FT-1's stated uncertainty in the file must give the what-if value.
    text = PLANT.replace(
        '[tags.FT-1]\nunit = "kg/s"\nuncertainty = { value = 0.5,',
        '[tags.FT-1]\nunit = "kg/s"\nuncertainty = { value = 0.25,',
    )
    assert text != PLANT
    again = plan(load_plant(_write(tmp_path, text)), what_if=False)
    w = tp.what_if.set_index(["instrument", "result"])
    for res in ("gross_power", "corrected_net_power"):
        assert w.loc[("FT-1", res), "U95_with_upgraded"] == pytest.approx(
            again.results.loc[res, "U95_with"], rel=1e-9
        )
    # allowed uncertainty: 1 % of corrected net power, 30 kJ/kWh on the heat rate
    res = tp.results
    assert res.loc["corrected_net_power", "U95_allowed"] == pytest.approx(
        0.01 * res.loc["corrected_net_power", "value"]
    )
    assert res.loc["heat_rate", "U95_allowed"] == pytest.approx(30 / 3600)
    assert res.loc["corrected_net_power", "within_allowed"] == bool(
        res.loc["corrected_net_power", "U95_with"] <= res.loc["corrected_net_power", "U95_allowed"]
    )
    assert res.loc["gross_power", "within_allowed"] is None


@pytest.mark.slow
def test_prediction_against_simulated_test_runs(bench):
    """Draw test runs from the planned instruments and push each through the real
    pipeline; the spread of the results must match the predicted uncertainty."""
    plant, tp = bench
    design = read_design(plant)
    inst = tp.instruments
    tags = list(plant.tags)
    n = 20  # samples per run: 20 min at 1 min, independent (no correlation time)
    index = pd.date_range("2026-05-01 08:00", periods=n, freq="1min", tz="UTC")
    rng = np.random.default_rng(2026)
    runs = 100
    got = {k: [] for k in ("gross_power", "carnot_efficiency", "corrected_net_power")}
    raw_power = []
    for _ in range(runs):
        # one systematic offset per instrument and run, fresh noise per sample
        data = {
            t: design.values[t]
            + rng.normal(0.0, inst.loc[t, "u_systematic"])
            + rng.normal(0.0, design.scatter[t], n)
            for t in tags
        }
        m = perftest.Run.from_frame(pd.DataFrame(data, index=index), plant).average(
            autocorrelation=False
        )
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ReconciliationWarning)
            rec = perftest.reconcile(plant, m)
        perf = perftest.evaluate(plant, rec, monte_carlo=False)
        for k in got:
            got[k].append(perf.value(k))
        raw_power.append(m["JT-1"].value)
    # The sample standard deviation of 100 runs has a relative standard error of
    # 1/sqrt(2 * 99) = 7.1 %; 21 % is three standard errors.  The heating
    # value is not drawn (the file states one value), so the results compared here
    # are those that do not depend on it.
    for k, values in got.items():
        sd = np.std(values, ddof=1)
        assert sd == pytest.approx(tp.results.loc[k, "u_with"], rel=0.21), k
    sd_raw = np.std(raw_power, ddof=1)
    assert sd_raw == pytest.approx(tp.results.loc["gross_power", "u_without"], rel=0.21)
    # and the reconciled spread is the smaller one, as predicted
    assert np.std(got["gross_power"], ddof=1) < 0.8 * sd_raw


def test_demo_plant_plan_is_consistent():
    """The demo plant carries a [design] table; its plan must run and cover every
    corrected result (checks the shipped file, not numbers)."""
    from pathlib import Path

    path = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold" / "plant.toml"
    tp = plan(load_plant(path), what_if=False)
    assert {"corrected_net_power", "corrected_heat_rate"} <= set(tp.results.index)
    assert tp.global_test["passed"]
    assert tp.results["within_allowed"].dropna().isin([True, False]).all()
    json_ready = tp.to_dict()
    assert set(json_ready["results"]) == set(tp.results.index)
