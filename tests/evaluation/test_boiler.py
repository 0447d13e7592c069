"""Boiler efficiency by the input-output and heat-loss methods, reconciled together.

Checks on the bundled invented boiler (sample_data/quellmoor), each against
something outside perftest's evaluation code:

* the input-output efficiency against a hand calculation (steam and feedwater
  enthalpies from the ``iapws`` package, IAPWS-IF97; ISO 6976 heating value);
* the heat-loss efficiency against the library's ``heat_loss_efficiency`` called
  directly on the averaged measurements;
* the reconciled efficiency: between the two and with a smaller uncertainty than
  either (weighted least squares of two estimates, GUM / common practice), and the
  combustion constraint closes at the reconciled values;
* Monte Carlo (numpy, GUM Supplement 1) against the linear propagation;
* an error planted in the fuel meter or in the O2 analyser is the tag serial
  elimination drops.
"""

from __future__ import annotations

import dataclasses
import json
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from iapws import IAPWS97

import perftest
from perftest.errors import PlantFileError
from perftest.thermo.combustion import air_humidity_ratio
from perftest.thermo.fuel import Gas
from perftest.thermo.heat_loss import heat_loss_efficiency

FOLDER = Path(__file__).resolve().parents[2] / "sample_data" / "quellmoor"
EFFICIENCIES = ("boiler_efficiency_direct", "boiler_efficiency_indirect", "boiler_efficiency")


@pytest.fixture(scope="module")
def plant():
    return perftest.load_plant(FOLDER / "plant.toml")


@pytest.fixture(scope="module")
def measurements(plant):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([FOLDER / "dcs.csv"], plant)
        return run.average()


@pytest.fixture(scope="module")
def rec(plant, measurements):
    return perftest.reconcile(plant, measurements)


@pytest.fixture(scope="module")
def perf(plant, rec):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return perftest.evaluate(plant, rec)


@pytest.fixture(scope="module")
def truth():
    return json.loads((FOLDER / "truth.json").read_text(encoding="utf-8"))


def _v(m, tag):
    return float(m[tag].value)


def test_every_boiler_result_has_value_uncertainty_basis_and_budget(perf):
    res = perf.results
    names = (*EFFICIENCIES, "excess_air", "dry_flue_gas_loss", "hydrogen_moisture_loss",
             "fuel_moisture_loss", "air_moisture_loss", "unburned_co_loss", "radiation_loss",
             "other_losses")  # fmt: skip
    for n in names:
        assert n in res.index, n
        assert np.isfinite(res.loc[n, ["value", "u", "U95"]].astype(float)).all(), n
        assert res.loc[n, "unit"] == "1"
    for n in EFFICIENCIES:
        assert res.loc[n, "basis"] == "lhv"
        assert res.loc[n, "u"] > 0
        b = perf.budgets[n]
        # shares of a budget add up to one (their definition)
        assert b["share"].sum() == pytest.approx(1.0, abs=1e-9)
    # the heating value and the radiation loss are inputs of the reconciled budget
    assert {"fuel.lhv", "given:radiation"} <= set(perf.budgets["boiler_efficiency"].index)


def test_direct_efficiency_against_a_hand_calculation(plant, measurements, perf):
    # Hand calculation: eta = m_steam (h_steam - h_fw) / (m_fuel * LHV), with the water
    # side reconciled on its own (feedwater and steam flow both metered: their
    # inverse-variance weighted mean, the reconciliation of one mass balance), the
    # enthalpies from the iapws package (IAPWS-IF97) and the LHV from ISO 6976.
    m = measurements
    fw, st = _v(m, "FT-101"), _v(m, "FT-102")
    ufw, ust = float(m["FT-101"].u), float(m["FT-102"].u)
    flow = (fw / ufw**2 + st / ust**2) / (1 / ufw**2 + 1 / ust**2)
    h_st = IAPWS97(P=_v(m, "PT-102") / 1e6, T=_v(m, "TT-102")).h * 1e3
    h_fw = IAPWS97(P=_v(m, "PT-101") / 1e6, T=_v(m, "TT-101")).h * 1e3
    comp = plant.sections["fuel"]["composition"]
    lhv = Gas(comp).inferior_calorific_value("mass", combustion_temperature=288.15)
    eta = flow * (h_st - h_fw) / (_v(m, "FT-201") * lhv)
    # 2e-4: the weighted mean leaves out the small adjustments of p and T that the
    # reconciliation makes through the state equations (their covariance is tiny
    # against the flows'), and IF97 in iapws vs CoolProp agree to ~1e-6 in h.
    assert perf.value("boiler_efficiency_direct") == pytest.approx(eta, rel=2e-4)


def test_indirect_efficiency_against_the_library_called_directly(plant, measurements, perf):
    m = measurements
    comp = plant.sections["fuel"]["composition"]
    lhv = Gas(comp).inferior_calorific_value("mass", combustion_temperature=288.15)
    ta = _v(m, "TT-401")
    eta = heat_loss_efficiency(
        comp,
        heating_value=lhv,
        heating_value_basis="lhv",
        flue_gas_temperature=_v(m, "TT-301"),
        air_temperature=ta,
        oxygen=_v(m, "AT-301"),
        carbon_monoxide=_v(m, "AT-303"),
        flue_gas_basis="dry",
        air_humidity_ratio=float(air_humidity_ratio(ta, 101325.0, _v(m, "MT-401"))),
        radiation_loss=0.005,
    )
    # 1e-7: the evaluation carries CoolProp's humidity ratio from a grid node by the
    # ideal-mixture ratio (relative error < 1e-5 of W, W's loss is ~1e-3 of the input)
    assert perf.value("boiler_efficiency_indirect") == pytest.approx(eta, abs=1e-7)


def test_methods_agree_within_their_uncertainty_and_with_truth(perf, truth):
    d, i = perf.value(EFFICIENCIES[0]), perf.value(EFFICIENCIES[1])
    u = math.hypot(perf.uncertainty(EFFICIENCIES[0]), perf.uncertainty(EFFICIENCIES[1]))
    # k = 2: about 95 % coverage of the difference of two independent estimates
    assert abs(d - i) <= 2.0 * u
    for n in EFFICIENCIES:
        U = float(perf.results.loc[n, "U95"])
        assert abs(perf.value(n) - truth["results"][n]) <= U, n


def test_reconciled_lies_between_the_methods_with_a_smaller_uncertainty(perf):
    d, i, r = (perf.value(n) for n in EFFICIENCIES)
    ud, ui, ur = (perf.uncertainty(n) for n in EFFICIENCIES)
    # a weighted mean of two estimates lies between them (1e-6: the small
    # correlation through the shared heating value may shift it by a hair)
    assert min(d, i) - 1e-6 <= r <= max(d, i) + 1e-6
    assert ur < ud and ur < ui
    # and cannot beat the inverse-variance combination of two independent estimates
    # by more than their shared heating value allows (5 %: the parameters' share)
    assert ur >= 0.95 / math.sqrt(1 / ud**2 + 1 / ui**2)


def test_combustion_constraint_closes_at_the_reconciled_values(plant, rec):
    comb = rec.model.combustion
    ta = rec.value("combustion.air_temperature")
    eta_loss = heat_loss_efficiency(
        comb.fuel,
        heating_value=comb.heating_value,
        heating_value_basis="lhv",
        flue_gas_temperature=rec.value("combustion.flue_gas_temperature"),
        air_temperature=ta,
        oxygen=rec.value("combustion.oxygen"),
        carbon_monoxide=rec.value("combustion.carbon_monoxide"),
        air_humidity_ratio=float(
            air_humidity_ratio(ta, 101325.0, rec.value("combustion.air_relative_humidity"))
        ),
        radiation_loss=0.005,
    )
    eta_io = rec.value("boiler.heat") / (rec.value("FT-201") * comb.heating_value)
    # 1e-6: the solver's constraint tolerance (energy row in MW, ~1e-6 of 9 MW)
    assert eta_io == pytest.approx(eta_loss, abs=1e-6)


def test_monte_carlo_agrees_with_the_linear_propagation(perf):
    mc = perf.monte_carlo
    for n in EFFICIENCIES + ("dry_flue_gas_loss", "excess_air"):
        # 5 %: 4000 trials resolve u to ~1.1 % (1/sqrt(2M)); the functions are
        # nearly linear over a few u, so a larger gap is a linearisation error
        assert mc.loc[n, "ratio"] == pytest.approx(1.0, abs=0.05), n
        assert mc.loc[n, "value"] == pytest.approx(perf.value(n), abs=0.2 * perf.uncertainty(n))


def _planted(m, tag, change):
    v = np.array(m.value, dtype=float).copy()
    v[m.index(tag)] = change(v[m.index(tag)])
    return dataclasses.replace(m, value=v)


@pytest.mark.parametrize(
    "tag, change",
    [("FT-201", lambda x: 1.05 * x), ("AT-301", lambda x: x + 0.015)],
    ids=["fuel meter +5 %", "O2 analyser +1.5 points"],
)
def test_a_planted_error_is_found_and_dropped(plant, measurements, tag, change):
    bad = _planted(measurements, tag, change)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plain = perftest.reconcile(plant, bad)
        rec = perftest.reconcile(plant, bad, eliminate=True)
    assert not plain.global_test["passed"]
    frame = plain.to_frame()
    top = frame.loc[frame["z"].idxmax()]
    assert top["tag"] == tag and top["suspect"]
    assert rec.eliminated_tags == (tag,)
    assert rec.global_test["passed"]


def test_a_wrong_fuel_meter_moves_the_direct_method_only(plant, measurements, perf):
    bad = _planted(measurements, "FT-201", lambda x: 1.05 * x)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rec = perftest.reconcile(plant, bad, eliminate=True)
        p2 = perftest.evaluate(plant, rec, monte_carlo=False)
    # direct: eta / 1.05; indirect: no fuel meter in it (1e-9: round-off)
    assert p2.value("boiler_efficiency_direct") == pytest.approx(
        perf.value("boiler_efficiency_direct") / 1.05, rel=1e-4
    )
    assert p2.value("boiler_efficiency_indirect") == pytest.approx(
        perf.value("boiler_efficiency_indirect"), abs=1e-9
    )
    # with the meter dropped the reconciled value follows the heat-loss method
    # (within its uncertainty)
    assert abs(p2.value("boiler_efficiency") - perf.value("boiler_efficiency")) <= perf.uncertainty(
        "boiler_efficiency_indirect"
    )


def _edited(tmp_path, old, new):
    text = (FOLDER / "plant.toml").read_text(encoding="utf-8")
    assert old in text
    path = tmp_path / "plant.toml"
    path.write_text(text.replace(old, new), encoding="utf-8")
    return path


@pytest.mark.parametrize(
    "old, new, match",
    [
        ('air_temperature = "TT-401"\n', "", "needs 'air_temperature'"),
        ('flue_gas_co = "AT-303"', 'flue_gas_co = "AT-999"', "'AT-999' is neither a tag"),
        ('useful_heat = "boiler.heat"', 'useful_heat = "boiler.hot"', "neither a tag, a group"),
        ("radiation_loss = { value = 0.5, kind = \"percent\", uncertainty = 0.15 }",
         'radiation_loss = { value = 120, kind = "absolute" }', "absolute loss needs its unit"),
        ("composition = {", 'lhv = { value = 47.1, unit = "MJ/kg" }\n# composition = {',
         "needs \\[fuel\\] composition"),
    ],
    ids=["no air temperature", "unknown tag", "unknown useful heat", "loss without unit",
         "no composition"],
)  # fmt: skip
def test_bad_firing_side_entries_are_refused(tmp_path, measurements, old, new, match):
    path = _edited(tmp_path, old, new)
    with pytest.raises(PlantFileError, match=match):
        plant = perftest.load_plant(path)
        perftest.reconcile(plant, measurements)


def test_a_power_plant_with_flue_gas_keys_reports_the_boiler_results(tmp_path):
    import shutil

    from perftest import demo

    src = FOLDER.parent / "brackenfold"
    for f in ("plant.toml", *demo.get_scenario("brackenfold").files):
        shutil.copy(src / f, tmp_path / f)
    text = (tmp_path / "plant.toml").read_text(encoding="utf-8")
    old = 'sink_temperature = "cw_in.temperature"\n'
    assert old in text
    # a flue-gas analysis stated as fixed values (a spot measurement); 195 degC puts
    # the heat-loss efficiency near the input-output one of the invented unit
    text = text.replace(old, old + '\n'.join([
        'flue_gas_o2 = { value = 3.0, unit = "%" }',
        'flue_gas_temperature = { value = 195, unit = "degC" }',
        'air_temperature = { value = 15.0, unit = "degC" }',
        "radiation_loss = 0.3",
        "",
    ]))  # fmt: skip
    (tmp_path / "plant.toml").write_text(text, encoding="utf-8")
    plant = perftest.load_plant(tmp_path / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([tmp_path / f for f in demo.get_scenario("brackenfold").files],
                                plant)  # fmt: skip
        rec = perftest.reconcile(plant, run.average())
        perf = perftest.evaluate(plant, rec, monte_carlo=False)
    assert rec.global_test["passed"]
    for n in (*EFFICIENCIES, "first_law_efficiency", "dry_flue_gas_loss"):
        assert n in perf.results.index and perf.uncertainty(n) > 0, n
    # the model's boiler heat is the useful heat: the reconciled efficiency is the
    # reconciled boiler heat over the reconciled fuel heat input (1e-9: round-off)
    comb = rec.model.combustion
    assert comb.useful_heat == ("boiler.heat",)
    eta = rec.value("boiler.heat") / (rec.value("FT-201") * comb.heating_value)
    assert perf.value("boiler_efficiency") == pytest.approx(eta, rel=1e-9)
    d, i = perf.value(EFFICIENCIES[0]), perf.value(EFFICIENCIES[1])
    u = math.hypot(perf.uncertainty(EFFICIENCIES[0]), perf.uncertainty(EFFICIENCIES[1]))
    assert abs(d - i) <= 2.0 * u  # k = 2, as above


def test_hhv_basis_is_consistent_with_lhv(tmp_path, measurements, perf):
    path = _edited(tmp_path, 'basis = "lhv"', 'basis = "hhv"')
    plant = perftest.load_plant(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rec = perftest.reconcile(plant, measurements)
        p_h = perftest.evaluate(plant, rec, monte_carlo=False)
    comp = plant.sections["fuel"]["composition"]
    gas = Gas(comp)
    lhv = gas.inferior_calorific_value("mass", combustion_temperature=288.15)
    hhv = gas.superior_calorific_value("mass", combustion_temperature=288.15)
    assert (p_h.results.loc[list(EFFICIENCIES), "basis"] == "hhv").all()
    # same useful heat and fuel: eta_HHV = eta_LHV * LHV / HHV (definition; 1e-9
    # round-off, the water side is reconciled alike on both bases)
    assert p_h.value("boiler_efficiency_direct") == pytest.approx(
        perf.value("boiler_efficiency_direct") * lhv / hhv, rel=1e-9
    )
    # the two methods still agree within their uncertainty on the HHV basis (k = 2)
    d, i = p_h.value(EFFICIENCIES[0]), p_h.value(EFFICIENCIES[1])
    assert abs(d - i) <= 2.0 * math.hypot(
        p_h.uncertainty(EFFICIENCIES[0]), p_h.uncertainty(EFFICIENCIES[1])
    )
    # and the computed losses grow by the latent heat of the fuel's water:
    # (1 - eta_H - r) HHV - (1 - eta_L - r) LHV = latent heat of the water formed, about
    # HHV - LHV (definition of the LHV from the HHV), r the radiation loss given as a
    # fraction of either heat input.  1.5 %: ISO 6976 takes the latent heat at the
    # 15 degC combustion reference, the heat-loss module at 25 degC (0.5 % apart), and
    # the two reference temperatures differ in the water's sensible heat.
    eta_l, eta_h = perf.value(EFFICIENCIES[1]), p_h.value(EFFICIENCIES[1])
    r = 0.005
    latent = (1 - eta_h - r) * hhv - (1 - eta_l - r) * lhv
    assert latent == pytest.approx(hhv - lhv, rel=0.015)


def test_a_guarantee_on_the_boiler_efficiency_gets_a_verdict(tmp_path, measurements):
    text = (FOLDER / "plant.toml").read_text(encoding="utf-8")
    path = tmp_path / "plant.toml"
    path.write_text(
        text
        + '\n[[guarantees]]\nquantity = "boiler_efficiency"\nvalue = 91.0\nunit = "%"\n'
        + 'direction = "at_least"\n',
        encoding="utf-8",
    )
    plant = perftest.load_plant(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        perf = perftest.evaluate(plant, perftest.reconcile(plant, measurements), monte_carlo=False)
    g = perf.guarantees.iloc[0]
    assert g["quantity"] == "boiler_efficiency"
    # 92.1 % with U95 0.3 % against at least 91 %: met without doubt
    assert g["verdict"] == "met"


def test_a_boiler_result_can_be_corrected_to_reference_conditions(tmp_path, rec):
    # Contract (DESIGN "Plant kinds"): corrections may name any result of the kind,
    # the boiler's among them. An additive correction of 0.1 %-points per K of
    # combustion-air temperature (a curve shape of the trade, common practice, no
    # source) is checked against the hand calculation corrected = measured - g(T_air),
    # u^2 = u_b^2 + (dg/dT u_T)^2 (GUM Eq. 10, block and condition uncorrelated).
    t_air = rec.value("TT-401") - 273.15
    ref = round(t_air) - 3.0  # a reference about 3 K from the test condition
    text = (FOLDER / "plant.toml").read_text(encoding="utf-8")
    text += (
        "\n[[corrections]]\n"
        'result = "boiler_efficiency"\n'
        'variable = "TT-401"\n'
        f'reference = {{ value = {ref}, unit = "degC" }}\n'
        'kind = "additive"\n'
        f"curve = {{ x = [{ref - 20.0}, {ref}, {ref + 20.0}], y = [-0.02, 0.0, 0.02], "
        'x_unit = "degC" }\n'
    )
    (tmp_path / "plant.toml").write_text(text, encoding="utf-8")
    plant2 = perftest.load_plant(tmp_path / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p2 = perftest.evaluate(plant2, rec)
    res = p2.results
    base = res.loc["boiler_efficiency"]
    got = res.loc["corrected_boiler_efficiency"]
    slope = 0.001  # per K, from the curve above
    # 1e-9: the same closed-form arithmetic on both sides
    assert got["value"] == pytest.approx(base["value"] - slope * (t_air - ref), rel=1e-9)
    u_t = math.sqrt(float(np.asarray(rec.covariance(["TT-401"]))[0, 0]))
    assert got["u"] == pytest.approx(math.hypot(base["u"], slope * u_t), rel=1e-9)
    assert "corrected_boiler_efficiency" in p2.budgets


def test_corrected_boiler_results_share_the_condition_they_are_corrected_for(tmp_path, rec):
    # Two boiler results corrected with the same additive curve of the air
    # temperature: their covariance holds the block's own part and the shared
    # condition's, cov = cov(a, b) + g^2 u_T^2 (GUM Eq. 16 for the two linear
    # combinations, the block and the condition uncorrelated).
    t_air = rec.value("TT-401") - 273.15
    ref = round(t_air) - 3.0
    text = (FOLDER / "plant.toml").read_text(encoding="utf-8")
    for result in ("boiler_efficiency", "boiler_efficiency_indirect"):
        text += (
            "\n[[corrections]]\n"
            f'result = "{result}"\n'
            'variable = "TT-401"\n'
            f'reference = {{ value = {ref}, unit = "degC" }}\n'
            'kind = "additive"\n'
            f"curve = {{ x = [{ref - 20.0}, {ref}, {ref + 20.0}], y = [-0.02, 0.0, 0.02], "
            'x_unit = "degC" }\n'
        )
    (tmp_path / "plant.toml").write_text(text, encoding="utf-8")
    plant2 = perftest.load_plant(tmp_path / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p2 = perftest.evaluate(plant2, rec)
    c = p2.cov
    a, b = "corrected_boiler_efficiency", "corrected_boiler_efficiency_indirect"
    u_t2 = float(np.asarray(rec.covariance(["TT-401"]))[0, 0])
    expected = c.loc["boiler_efficiency", "boiler_efficiency_indirect"] + 0.001**2 * u_t2
    # 1e-9: the same closed-form arithmetic on both sides
    assert c.loc[a, b] == pytest.approx(expected, rel=1e-9)
    assert c.loc[b, a] == c.loc[a, b]
