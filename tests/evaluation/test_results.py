"""perftest.evaluation.results: performance results and their propagated uncertainty.

Outside checks: textbook arithmetic of the first and second law, the GUM law of
propagation written out by hand (JCGM 100:2008, Eq. 13), and an independent
Monte Carlo propagation with numpy (JCGM 101:2008).  The reconciliation is
replaced by a small stand-in that serves values and a covariance, so these tests
do not depend on the balance engine.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from standin import StandIn

from perftest.errors import InputError, PlantFileError
from perftest.evaluation.results import Performance, evaluate, fuel_exergy_ratio
from perftest.plant.file import load_plant

PLANT = """
[site]
name = "Test bench"
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
[tags.QT-C]
unit = "MW"

[performance]
gross_power = "JT-1"
auxiliary_power = "JT-2"
heat_input = "fuel"
source_temperature = "TT-S"
sink_temperature = "TT-K"
cycle_heat = "QT-C"

[fuel]
mass_flow = "FT-F"
lhv = { value = 50.0, unit = "MJ/kg" }
uncertainty = { value = 0.5, kind = "percent", level = "standard" }
exergy_ratio = 1.04
"""

CORRECTIONS = """
[[corrections]]
result = "net_power"
variable = "TT-K"
reference = { value = 290.0, unit = "K" }
kind = "multiplicative"
curve = { x = [280.0, 290.0, 305.0, 315.0], y = [1.01, 1.0, 0.97, 0.95], x_unit = "K" }

[[guarantees]]
quantity = "corrected_net_power"
value = {guarantee}
unit = "MW"
direction = "at_least"
"""


def _plant(tmp_path, extra: str = ""):
    path = tmp_path / "plant.toml"
    path.write_text(textwrap.dedent(PLANT) + extra, encoding="utf-8")
    return load_plant(path)


# Inputs of the textbook case: 30 MW gross, 0 auxiliary, 2 kg/s of a 50 MJ/kg fuel
# (100 MW), between 600 K and 300 K; the working fluid absorbs 75 MW.
VALUES = {"JT-1": 30e6, "JT-2": 0.0, "FT-F": 2.0, "TT-S": 600.0, "TT-K": 300.0, "QT-C": 75e6}
U = {"JT-1": 0.09e6, "JT-2": 1e3, "FT-F": 0.01, "TT-S": 1.0, "TT-K": 0.1, "QT-C": 0.3e6}


def _cov(rho_power_fuel: float = 0.0) -> np.ndarray:
    names = list(VALUES)
    u = np.array([U[n] for n in names])
    c = np.diag(u**2)
    i, j = names.index("JT-1"), names.index("FT-F")
    c[i, j] = c[j, i] = rho_power_fuel * u[i] * u[j]
    return c


def test_textbook_first_and_second_law(tmp_path):
    perf = evaluate(_plant(tmp_path), StandIn(VALUES, _cov()), monte_carlo=False)
    assert isinstance(perf, Performance)
    r = perf.results["value"]
    # Textbook arithmetic (e.g. Cengel & Boles, Thermodynamics, ch. 6-8; from memory):
    # eta = 30/100; Carnot = 1 - 300/600 = 0.5; cycle efficiency = 30/75 = 0.4 and
    # second law = cycle / Carnot = 0.4/0.5 = 0.8 (like with like: the heat that
    # crosses the source and sink temperatures);
    # Curzon-Ahlborn = 1 - sqrt(0.5); heat rate = 100/30 J/J = 12 000 kJ/kWh.
    # Exact arithmetic, so only rounding separates the values (rel 1e-12).
    assert r["first_law_efficiency"] == pytest.approx(0.30, rel=1e-12)
    assert r["carnot_efficiency"] == pytest.approx(0.50, rel=1e-12)
    assert r["cycle_efficiency"] == pytest.approx(0.40, rel=1e-12)
    assert r["second_law_efficiency"] == pytest.approx(0.80, rel=1e-12)
    assert r["curzon_ahlborn_efficiency"] == pytest.approx(1 - math.sqrt(0.5), rel=1e-12)
    assert r["heat_rate"] * 3600.0 == pytest.approx(12000.0, rel=1e-12)
    assert r["heat_input"] == pytest.approx(100e6, rel=1e-12)
    assert r["exergetic_efficiency"] == pytest.approx(30.0 / 104.0, rel=1e-12)
    assert perf.results.loc["source_temperature", "unit"] == "K"
    assert perf.results.loc["first_law_efficiency", "unit"] == "1"


def test_uncertainty_matches_gum_formula(tmp_path):
    perf = evaluate(_plant(tmp_path), StandIn(VALUES, _cov()), monte_carlo=False)
    # GUM Eq. 13 for a product/quotient of uncorrelated inputs: relative
    # uncertainties add in quadrature.  eta = (P - A) / (m H).
    P, A, m = VALUES["JT-1"], VALUES["JT-2"], VALUES["FT-F"]
    rel_net = math.hypot(U["JT-1"], U["JT-2"]) / (P - A)
    rel_eta = math.sqrt(rel_net**2 + (U["FT-F"] / m) ** 2 + 0.005**2)
    eta = (P - A) / (m * 50e6)
    # Central differences with a step of 1e-3 u are exact to ~1e-7 for these
    # smooth functions; 1e-5 leaves a margin.
    assert perf.uncertainty("first_law_efficiency") == pytest.approx(rel_eta * eta, rel=1e-5)
    assert perf.uncertainty("heat_rate") == pytest.approx(rel_eta / eta, rel=1e-5)
    # Carnot: d(eta_C)/dT_sink = -1/T_source, d/dT_source = T_sink/T_source^2.
    u_c = math.hypot(U["TT-K"] / 600.0, 300.0 * U["TT-S"] / 600.0**2)
    assert perf.uncertainty("carnot_efficiency") == pytest.approx(u_c, rel=1e-5)
    # Expanded with k = 1.96 (normal, infinite dof): 1e-9 for the t/normal quantile.
    row = perf.results.loc["first_law_efficiency"]
    assert row["U95"] == pytest.approx(1.959964 * row["u"], rel=1e-6)
    # Budget shares add up to one (100 % of the variance).
    assert perf.budgets["first_law_efficiency"]["share"].sum() == pytest.approx(1.0, abs=1e-9)


def test_correlation_between_power_and_fuel_is_used(tmp_path):
    rho = 0.8
    perf = evaluate(_plant(tmp_path), StandIn(VALUES, _cov(rho)), monte_carlo=False)
    P, m = VALUES["JT-1"], VALUES["FT-F"]
    rp, rm = U["JT-1"] / P, U["FT-F"] / m
    ra = U["JT-2"] / P
    # GUM Eq. 16 with the correlation term; eta ~ P / m so the term enters with -.
    rel = math.sqrt(rp**2 + ra**2 + rm**2 - 2 * rho * rp * rm + 0.005**2)
    assert perf.uncertainty("first_law_efficiency") == pytest.approx(rel * 0.3, rel=1e-5)


def test_linear_propagation_agrees_with_independent_monte_carlo(tmp_path):
    cov = _cov(0.5)
    perf = evaluate(_plant(tmp_path), StandIn(VALUES, cov), monte_carlo=False)
    rng = np.random.default_rng(7)
    n = 200_000
    names = list(VALUES)
    x = rng.multivariate_normal([VALUES[k] for k in names], cov, size=n)
    hv = 50e6 * (1 + 0.005 * rng.standard_normal(n))
    d = dict(zip(names, x.T, strict=True))
    eta = (d["JT-1"] - d["JT-2"]) / (d["FT-F"] * hv)
    carnot = 1 - d["TT-K"] / d["TT-S"]
    second = d["JT-1"] / d["QT-C"] / carnot
    # 200 000 trials estimate a standard deviation to 1/sqrt(2n) = 0.16 %; the
    # inputs' 0.3-1 % uncertainties make second-order terms ~1e-4.  2 % covers both.
    for name, samples in (
        ("first_law_efficiency", eta),
        ("carnot_efficiency", carnot),
        ("second_law_efficiency", second),
    ):
        assert perf.uncertainty(name) == pytest.approx(samples.std(ddof=1), rel=0.02), name
        assert perf.value(name) == pytest.approx(samples.mean(), rel=1e-3), name


def test_built_in_monte_carlo_check_is_reported(tmp_path):
    perf = evaluate(_plant(tmp_path), StandIn(VALUES, _cov()), monte_carlo=True)
    mc = perf.monte_carlo
    assert mc is not None and "ratio" in mc.columns
    # 20 000 trials: relative standard error of u about 0.5 %; 3 % is a safe band.
    assert mc.loc["first_law_efficiency", "ratio"] == pytest.approx(1.0, abs=0.03)


@pytest.mark.parametrize(
    ("guarantee", "verdict"),
    # corrected net = 30 MW / 0.98 = 30.612 MW at 300 K; U95 ~ 0.18 MW.
    [(29.0, "met"), (30.6, "inconclusive"), (32.0, "not met")],
)
def test_corrections_and_guarantee_verdicts(tmp_path, guarantee, verdict):
    plant = _plant(tmp_path, CORRECTIONS.replace("{guarantee}", str(guarantee)))
    perf = evaluate(plant, StandIn(VALUES, _cov()), monte_carlo=False)
    # Linear interpolation by hand: at 300 K the curve reads 1 - 0.03 x 10/15 = 0.98.
    corrected = perf.value("corrected_net_power")
    assert corrected == pytest.approx((30e6 - 0.0) / 0.98, rel=1e-12)
    g = perf.guarantees.iloc[0]
    assert g["verdict"] == verdict
    assert g["quantity"] == "corrected_net_power" and g["direction"] == "at_least"
    assert g["U95"] == pytest.approx(perf.results.loc["corrected_net_power", "U95"])
    # The correction curve's slope feeds the sink temperature into the uncertainty:
    # d(P/f)/dT = -P f'/f^2 with f' = -0.002/K between 290 and 305 K.
    sens = perf.budgets["corrected_net_power"].loc["TT-K", "sensitivity"]
    assert sens == pytest.approx(30e6 * 0.002 / 0.98**2, rel=1e-6)


def test_ufloats_keep_correlation(tmp_path):
    perf = evaluate(_plant(tmp_path), StandIn(VALUES, _cov()), monte_carlo=False)
    u = perf.ufloats()
    # heat rate x efficiency = 1 exactly: with correlations kept its uncertainty
    # vanishes (up to rounding of the covariance, 1e-9).
    prod = u["heat_rate"] * u["first_law_efficiency"]
    assert prod.nominal_value == pytest.approx(1.0, rel=1e-12)
    assert prod.std_dev < 1e-9
    assert u["heat_rate"].std_dev > 1e-3


def test_fuel_exergy_ratio_close_to_kotas_value():
    # Kotas (1985, Sect. 2.5; from memory): about 1.04 for gaseous hydrocarbons.
    # Methane's ratio from standard chemical exergy (Szargut 1988) is 1.036-1.04;
    # 0.01 is the spread of the published values.
    assert fuel_exergy_ratio({"methane": 1.0}, 50.03e6, 16.04246e-3) == pytest.approx(
        1.04, abs=0.01
    )
    assert fuel_exergy_ratio({"unobtainium": 1.0}, 50e6, 0.016) == 1.04


def test_bad_input(tmp_path):
    plant = _plant(tmp_path)
    with pytest.raises(InputError, match="'level' parameter of evaluate"):
        evaluate(plant, StandIn(VALUES, _cov()), level=1.5)
    bare = tmp_path / "bare.toml"
    bare.write_text('[site]\nname = "x"\n[tags.A]\nunit = "MW"\n', encoding="utf-8")
    with pytest.raises(PlantFileError, match=r"no \[performance\] table"):
        evaluate(load_plant(bare), StandIn(VALUES, _cov()))
    values = dict(VALUES)
    del values["TT-S"]
    names = list(values)
    with pytest.raises(PlantFileError, match="TT-S"):
        evaluate(plant, StandIn(values, _cov()[np.ix_(range(4), range(4))][: len(names)]))


# The PLANT above with the fuel metered as a volume flow and given by its composition.
VOLUME_FUEL = (
    textwrap.dedent(PLANT)
    .split("[fuel]")[0]
    .replace('[tags.FT-F]\nunit = "kg/s"', '[tags.FV-F]\nunit = "m3/s"')
    .replace('mass_flow = "FT-F"', "")
    + '[fuel]\nvolume_flow = "FV-F"\n'
    + "composition = { methane = 0.95, ethane = 0.03, nitrogen = 0.02 }\n{reference}\n"
)


@pytest.mark.parametrize(
    ("reference", "t_met", "p_met"),
    [
        ("", 288.15, 101325.0),
        (
            'reference_conditions = { temperature = { value = 0.0, unit = "degC" }, '
            'pressure = { value = 1.01325, unit = "bar" } }',
            273.15,
            101325.0,
        ),
    ],
)
def test_volume_flow_fuel_uses_the_volumetric_calorific_value(tmp_path, reference, t_met, p_met):
    from perftest.thermo.fuel import Gas

    path = tmp_path / "plant.toml"
    path.write_text(VOLUME_FUEL.replace("{reference}", reference), encoding="utf-8")
    plant = load_plant(path)
    gas = Gas({"methane": 0.95, "ethane": 0.03, "nitrogen": 0.02})
    # 2 kg/s of fuel metered as a volume flow at the stated reference conditions.
    rho = gas.density(t_met, p_met)
    values = {**VALUES, "FV-F": 2.0 / rho}
    values.pop("FT-F")
    u = {**U, "FV-F": 0.01 / rho}
    names = list(values)
    stand_in = StandIn(values, np.diag([u.get(n, U.get(n)) ** 2 for n in names]))
    perf = evaluate(plant, stand_in, monte_carlo=False)
    # Volume flow x volumetric calorific value (ISO 6976: the volumetric value is the
    # molar value x the real-gas molar density at metering conditions) must equal the
    # mass flow x the mass-based value: the heat input of the same 2 kg/s of gas.
    expected = 2.0 * gas.inferior_calorific_value("mass")
    assert perf.value("heat_input") == pytest.approx(expected, rel=1e-12)


def test_volume_flow_reference_conditions_are_validated(tmp_path):
    path = tmp_path / "plant.toml"
    path.write_text(
        VOLUME_FUEL.replace("{reference}", "reference_conditions = { temp = 15.0 }"),
        encoding="utf-8",
    )
    stand_in = StandIn({**VALUES, "FV-F": 2.0}, np.eye(len(VALUES) + 1))
    with pytest.raises(PlantFileError, match="reference_conditions.*temp"):
        evaluate(load_plant(path), stand_in, monte_carlo=False)
