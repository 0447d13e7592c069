"""The chiller (sample_data/ostrenby) and CHP (sample_data/wrenhollow) demo scenarios.

Three kinds of check, each against something outside perftest's evaluation code:

* the generators' true states satisfy every balance of their plant files and the
  contract's definitions of the results (checked here with CoolProp directly);
* a calculation from the plain CSV means (pandas and CoolProp only: no perftest
  import, reconciliation or evaluation code) agrees with ``truth.json`` within the
  expanded uncertainty that the instruments' stated uncertainties give it;
* perftest's path (load_plant, read_run, window, average, reconcile, evaluate)
  reconciles the clean logs with a passed global test and reproduces every
  contract result of the kind within its U95.
"""

from __future__ import annotations

import importlib.util
import json
import math
import tomllib
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pandas as pd
import pytest

import perftest
from perftest import demo
from perftest.errors import InputError, PlantFileError

ROOT = Path(__file__).resolve().parents[1] / "sample_data"
CHILLER = ROOT / "ostrenby"
CHP = ROOT / "wrenhollow"
FILES = {"ostrenby": ("bms.csv", "testlog.csv"), "wrenhollow": ("dcs.csv", "testlog.csv")}

#: results the contract (DESIGN.md, "Plant kinds") names for each kind
CHILLER_RESULTS = (
    "cooling_capacity",
    "power_input",
    "cop",
    "carnot_cop",
    "second_law_efficiency",
    "exergetic_efficiency",
    "heat_rejected",
)
CHP_RESULTS = (
    "net_power",
    "first_law_efficiency",
    "heat_rate",
    "carnot_efficiency",
    "cycle_efficiency",
    "second_law_efficiency",
    "exergetic_efficiency",
    "heat_export",
    "fuel_utilisation",
    "power_to_heat_ratio",
)

# Balances of the true state are computed in double precision from CoolProp
# states; 1e-9 relative is far above rounding (1e-13) and far below any
# instrument (1e-3), so a balance that does not close is a generator error.
BALANCE_RTOL = 1e-9


class KindNotEvaluated(Exception):
    """evaluate() refused the plant's [performance] kind (not implemented yet)."""


def _truth(folder: Path) -> dict:
    return json.loads((folder / "truth.json").read_text(encoding="utf-8"))


def _plant_table(folder: Path) -> dict:
    with open(folder / "plant.toml", "rb") as fh:
        return tomllib.load(fh)


# --------------------------------------------------------------------------- CoolProp
def _w(p, T, what="H"):
    """Water property by IAPWS-IF97 (the backend perftest uses for "water")."""
    return CP.PropsSI(what, "P", p, "T", T, "IF97::Water")


def _r(what, a, av, b, bv):
    return CP.PropsSI(what, a, av, b, bv, "HEOS::R134a")


def _close(a, b, scale):
    return abs(a - b) <= BALANCE_RTOL * abs(scale)


# --------------------------------------------------------------------------- generators
@pytest.mark.parametrize("folder", [CHILLER, CHP], ids=["ostrenby", "wrenhollow"])
def test_generator_reproduces_the_bundled_files(folder, tmp_path):
    spec = importlib.util.spec_from_file_location(f"gen_{folder.name}", folder / "generate.py")
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    gen.main(tmp_path)
    for f in (*FILES[folder.name], "plant.toml", "truth.json"):
        assert (tmp_path / f).read_bytes() == (folder / f).read_bytes(), f


@pytest.mark.parametrize("point", range(3), ids=["100%", "75%", "50%"])
def test_chiller_truth_closes_every_balance(point):
    t = _truth(CHILLER)["points"][point]
    s, u, r = t["streams"], t["units"], t["results"]
    for sid, st in s.items():
        if st["x"] is None:  # single phase: h = h(p, T)
            fluid = "HEOS::R134a" if sid in ("suction", "discharge", "liquid") else "IF97::Water"
            h = CP.PropsSI("H", "P", st["p"], "T", st["T"], fluid)
            assert _close(h, st["h"], st["h"]), sid
        else:  # wet: T = Tsat(p)
            assert abs(_r("T", "P", st["p"], "Q", 0.0) - st["T"]) < 1e-9, sid
    q_evap = u["evaporator.heat"]
    assert _close(
        s["chw_return"]["m"] * (s["chw_return"]["h"] - s["chw_leaving"]["h"]), q_evap, q_evap
    )
    m_r = s["suction"]["m"]
    assert _close(m_r * (s["suction"]["h"] - s["evaporator_in"]["h"]), q_evap, q_evap)
    assert _close(s["evaporator_in"]["h"], s["liquid"]["h"], s["liquid"]["h"])  # valve
    assert _close(s["chw_supply"]["h"], s["chw_leaving"]["h"], s["chw_leaving"]["h"])  # pipe
    power = u["compressor.power"]
    lhs = m_r * (s["discharge"]["h"] - s["suction"]["h"]) + u["compressor.heat_loss"]
    assert _close(lhs, power, power)
    q_cond = u["condenser.heat"]
    assert _close(m_r * (s["discharge"]["h"] - s["liquid"]["h"]), q_cond, q_cond)
    assert _close(s["cw_in"]["m"] * (s["cw_out"]["h"] - s["cw_in"]["h"]), q_cond, q_cond)
    # The contract's definitions (DESIGN.md, "Plant kinds").
    tc, th, t0 = s["chw_supply"]["T"], s["cw_out"]["T"], t["dead_state"]["temperature"]
    assert r["cold_temperature"] == tc and r["hot_temperature"] == th
    assert r["cooling_capacity"] == q_evap and r["heat_rejected"] == q_cond
    assert r["power_input"] == power
    assert math.isclose(r["cop"], q_evap / power, rel_tol=1e-12)
    assert math.isclose(r["carnot_cop"], tc / (th - tc), rel_tol=1e-12)
    assert math.isclose(r["second_law_efficiency"], r["cop"] / r["carnot_cop"], rel_tol=1e-12)
    # exergy of heat Q drawn at T below T0: Q (T0/T - 1) = -Q (1 - T0/T)
    assert math.isclose(r["exergetic_efficiency"], q_evap * (t0 / tc - 1.0) / power, rel_tol=1e-12)
    # a real machine stays below the reversible one
    assert 0.0 < r["second_law_efficiency"] < 1.0


def test_chp_truth_closes_every_balance():
    t = _truth(CHP)
    s, u, r = t["streams"], t["units"], t["results"]
    m, h = (lambda k: s[k]["m"]), (lambda k: s[k]["h"])
    for sid, st in s.items():
        if st["x"] is None:
            assert _close(_w(st["p"], st["T"]), st["h"], st["h"]), sid
        else:
            assert abs(CP.PropsSI("T", "P", st["p"], "Q", 0.0, "IF97::Water") - st["T"]) < 1e-9
    q_b = u["boiler.heat"]
    assert _close(m("main_steam") * (h("main_steam") - h("feedwater")), q_b, q_b)
    shaft = u["turbine.power"]
    flows = m("main_steam") * h("main_steam") - m("extraction") * h("extraction")
    assert _close(flows - m("exhaust") * h("exhaust"), shaft, shaft)
    assert _close(m("main_steam"), m("extraction") + m("exhaust"), m("main_steam"))
    assert _close(shaft, r["gross_power"] * (1 + t["design"]["generator_loss_fraction"]), shaft)
    assert _close(m("extraction"), m("process_steam") + m("tank_steam_supply"), m("extraction"))
    for k in ("process_steam", "tank_steam_supply", "tank_steam"):
        assert h(k) == h("extraction")  # splitter and reducing valve: same enthalpy
    ins = ("condensate", "process_return", "makeup", "tank_steam")
    assert _close(sum(m(k) for k in ins), m("tank_outlet"), m("tank_outlet"))
    e_in = sum(m(k) * h(k) for k in ins)
    assert _close(e_in, m("tank_outlet") * h("tank_outlet"), e_in)
    q_c = u["condenser.heat"]
    assert _close(m("exhaust") * (h("exhaust") - h("condensate")), q_c, q_c)
    assert _close(m("cw_in") * (h("cw_out") - h("cw_in")), q_c, q_c)
    assert _close(m("process_steam"), m("process_return") + m("makeup"), m("process_steam"))
    # The contract's definitions.
    fuel = t["fuel"]
    assert _close(fuel["mass_flow"] * fuel["lhv"], r["heat_input"], r["heat_input"])
    net = r["gross_power"] - r["auxiliary_power"]
    export = (
        m("process_steam") * h("process_steam")
        - m("process_return") * h("process_return")
        - (m("process_steam") - m("process_return")) * h("makeup")
    )
    expected = {
        "net_power": net,
        "first_law_efficiency": net / r["heat_input"],
        "heat_rate": r["heat_input"] / net,
        "carnot_efficiency": 1 - s["cw_in"]["T"] / s["main_steam"]["T"],
        "cycle_efficiency": r["gross_power"] / q_b,
        "heat_export": export,
        "fuel_utilisation": (net + export) / r["heat_input"],
        "power_to_heat_ratio": net / export,
    }
    expected["second_law_efficiency"] = expected["cycle_efficiency"] / expected["carnot_efficiency"]
    for name, value in expected.items():
        assert math.isclose(r[name], value, rel_tol=1e-12), name
    assert 0.0 < r["second_law_efficiency"] < 1.0
    assert r["first_law_efficiency"] < r["fuel_utilisation"] < 1.0


# --------------------------------------------------------------------------- CSV means
def _means(folder: Path, start, end) -> dict:
    """Plain means of every column over [start, end), bad cells left out.

    A single-sample spike planted in a 10 s channel moves an hour's mean by under
    0.01 K, far inside the tolerances below; no screen is applied on purpose.
    """
    out = {}
    for f in FILES[folder.name]:
        df = pd.read_csv(folder / f, skiprows=[1], index_col=0, parse_dates=True)
        df = df.apply(pd.to_numeric, errors="coerce")
        sel = df[(df.index >= pd.Timestamp(start)) & (df.index < pd.Timestamp(end))]
        out.update(sel.mean().to_dict())
    return out


def _stated_u(folder: Path, means: dict) -> dict:
    """Standard uncertainty of each tag's mean from its stated (95 %) uncertainty in
    plant.toml, in the tag's logged unit.  The random part of an hour's mean is
    under a tenth of these for every tag (noise levels in generate.py), so it is
    left out."""
    out = {}
    for tag, spec in _plant_table(folder)["tags"].items():
        unc = spec["uncertainty"]
        assert unc["level"] == 0.95
        if unc["kind"] == "absolute":
            u95 = unc["value"]
        elif unc["kind"] == "percent_of_reading":
            u95 = unc["value"] / 100 * abs(means[tag])
        else:
            lo, hi = spec["span"]
            u95 = unc["value"] / 100 * (hi - lo)
        out[tag] = u95 / 1.96  # normal quantile, JCGM 100:2008 Table G.1
    return out


def _check_within_u95(func, x: dict, u: dict, truth: dict, names) -> None:
    """Each ``func(x)[name]`` must agree with ``truth[name]`` within its expanded
    uncertainty (k = 2) from linear propagation with central differences.

    Inputs are taken as independent.  Tags of one calibration lot are in fact
    fully correlated, which cancels much of a temperature difference's
    uncertainty; ignoring it makes the tolerance larger, never smaller, than the
    stated uncertainties give."""
    y = func(x)
    var = dict.fromkeys(names, 0.0)
    for k, uk in u.items():
        if uk == 0.0:
            continue
        up, dn = func({**x, k: x[k] + uk}), func({**x, k: x[k] - uk})
        for n in names:
            var[n] += ((up[n] - dn[n]) / 2) ** 2
    for n in names:
        U95 = 2.0 * math.sqrt(var[n])
        assert abs(y[n] - truth[n]) <= U95, (n, y[n], truth[n], U95)


def _fixed(table, stream, var="pressure"):
    q = table["streams"][stream][var]
    assert q["unit"] == "bar"
    return q["value"] * 1e5


@pytest.mark.parametrize("point", range(3), ids=["100%", "75%", "50%"])
def test_chiller_csv_means_agree_with_truth(point):
    t = _truth(CHILLER)["points"][point]
    plant = _plant_table(CHILLER)
    rho = plant["tags"]["FT-301"]["density"]["value"]
    p_ret, p_sup = _fixed(plant, "chw_return"), _fixed(plant, "chw_supply")
    p_ci, p_co = _fixed(plant, "cw_in"), _fixed(plant, "cw_out")

    def results(x):
        tc = x["TT-302B"] + 273.15  # the test RTD in the supply header
        th = x["TT-312"] + 273.15
        cooling = x["FT-301"] * rho / 3600 * (_w(p_ret, x["TT-301"] + 273.15) - _w(p_sup, tc))
        rejected = x["FT-311"] * (_w(p_co, th) - _w(p_ci, x["TT-311"] + 273.15))
        power = x["JT-301B"] * 1e3  # the test power analyser
        cop = cooling / power
        carnot = tc / (th - tc)
        return {
            "cooling_capacity": cooling,
            "power_input": power,
            "heat_rejected": rejected,
            "cop": cop,
            "carnot_cop": carnot,
            "second_law_efficiency": cop / carnot,
            "exergetic_efficiency": cooling * ((x["TT-391"] + 273.15) / tc - 1) / power,
            "heat_balance_closure": (cooling + power - rejected) / rejected,
        }

    x = _means(CHILLER, t["start"], t["end"])
    u = _stated_u(CHILLER, x)
    used = ("TT-301", "TT-302B", "FT-301", "TT-311", "TT-312", "FT-311", "JT-301B", "TT-391")
    _check_within_u95(
        results,
        x,
        {k: u[k] for k in used},
        t["results"],
        (*CHILLER_RESULTS, "heat_balance_closure"),
    )


# ISO 6976:2016 Table 3, net calorific value at 15 degC [kJ/mol] and molar mass
# [g/mol] (from memory); standard chemical exergy [kJ/mol], Szargut, Morris and
# Steward (1988), Table I (from memory).
_GAS = {
    "methane": (802.69, 16.04246, 831.65),
    "ethane": (1428.84, 30.06904, 1495.84),
    "propane": (2043.37, 44.09562, 2154.0),
    "n-butane": (2657.60, 58.12220, 2805.8),
    "nitrogen": (0.0, 28.01340, 0.72),
    "carbon_dioxide": (0.0, 44.00950, 19.87),
}


def test_chp_csv_means_agree_with_truth():
    t = _truth(CHP)
    plant = _plant_table(CHP)
    comp = plant["fuel"]["composition"]
    molar_mass = sum(x * _GAS[c][1] for c, x in comp.items()) * 1e-3
    lhv = sum(x * _GAS[c][0] for c, x in comp.items()) * 1e3 / molar_mass
    e_chem = sum(x * _GAS[c][2] for c, x in comp.items()) * 1e3
    e_chem += 8.314462618 * 298.15 * sum(x * math.log(x) for x in comp.values())
    ex_ratio = e_chem / molar_mass / lhv
    p_ret, p_mu = _fixed(plant, "process_return"), _fixed(plant, "makeup")

    def results(x):
        pa = x["PT-690"] * 100.0
        t0 = x["TT-691"] + 273.15
        kel = {k: x[k] + 273.15 for k in x if k.startswith("TT-")}
        gross = x["JT-401B"] * 1e3  # the test wattmeter
        net = gross - x["JT-402"] * 1e6
        heat_input = x["FT-601"] / 3600 * lhv * x["lhv_factor"]
        h_ms = _w(x["PT-401"] * 1e5 + pa, kel["TT-401"])
        cycle_heat = x["FT-491"] / 3.6 * (h_ms - _w(x["PT-491"] * 1e5 + pa, kel["TT-491"]))
        m_ps, m_ret = x["FT-421"] / 3.6, x["FT-461"] / 3.6
        p_ps = x["PT-421"] * 1e5 + pa
        h0, s0 = _w(pa, t0), _w(pa, t0, "S")

        def ex(p, T):
            return _w(p, T) - h0 - t0 * (_w(p, T, "S") - s0)

        ps_, ret_, mu_ = (p_ps, kel["TT-421"]), (p_ret, kel["TT-461"]), (p_mu, kel["TT-471"])
        export = m_ps * _w(*ps_) - m_ret * _w(*ret_) - (m_ps - m_ret) * _w(*mu_)
        ex_export = m_ps * ex(*ps_) - m_ret * ex(*ret_) - (m_ps - m_ret) * ex(*mu_)
        carnot = 1 - kel["TT-501"] / kel["TT-401"]
        cycle = gross / cycle_heat
        return {
            "net_power": net,
            "first_law_efficiency": net / heat_input,
            "heat_rate": heat_input / net,
            "carnot_efficiency": carnot,
            "cycle_efficiency": cycle,
            "second_law_efficiency": cycle / carnot,
            "exergetic_efficiency": (net + ex_export) / (heat_input * ex_ratio),
            "heat_export": export,
            "fuel_utilisation": (net + export) / heat_input,
            "power_to_heat_ratio": net / export,
        }

    x = _means(CHP, t["steady_from"], t["steady_to"])
    u = _stated_u(CHP, x)
    # the calorific value's stated uncertainty ([fuel] uncertainty, 95 %)
    x["lhv_factor"] = 1.0
    u["lhv_factor"] = plant["fuel"]["uncertainty"]["value"] / 100 / 1.96
    used = (
        "JT-401B JT-402 FT-601 PT-401 TT-401 FT-491 PT-491 TT-491 FT-421 PT-421 TT-421 "
        "FT-461 TT-461 TT-471 TT-501 TT-691 PT-690 lhv_factor"
    ).split()
    _check_within_u95(results, x, {k: u[k] for k in used}, t["results"], CHP_RESULTS)


# --------------------------------------------------------------------------- perftest path
@pytest.fixture(scope="module")
def chiller_run():
    plant = perftest.load_plant(CHILLER / "plant.toml")
    return plant, perftest.read_run([CHILLER / f for f in FILES["ostrenby"]], plant)


@pytest.fixture(scope="module")
def chiller_points(chiller_run):
    """Reconciliation of each load point's hour (stated window, outliers screened)."""
    plant, run = chiller_run
    out = []
    for p in _truth(CHILLER)["points"]:
        m = run.window(p["start"], p["end"]).screen_outliers(alpha=0.01).average()
        out.append((p, perftest.reconcile(plant, m)))
    return out


@pytest.fixture(scope="module")
def chp_rec():
    plant = perftest.load_plant(CHP / "plant.toml")
    run = perftest.read_run([CHP / f for f in FILES["wrenhollow"]], plant)
    window = run.steadiest_window("2h")
    m = window.screen_outliers(alpha=0.01).average()
    return plant, window, perftest.reconcile(plant, m)


def test_chiller_steadiest_hour_is_a_load_point(chiller_run):
    _, run = chiller_run
    w = run.steadiest_window("1h")
    points = [
        (pd.Timestamp(p["start"], tz="UTC"), pd.Timestamp(p["end"], tz="UTC"))
        for p in _truth(CHILLER)["points"]
    ]
    # no hour that overlaps a change of load is steadier: the window lies in a load
    # point (windows are [start, end), so it may end one 1-min interval past the point)
    step = pd.Timedelta("1min")
    assert any(a <= w.start and w.end <= b + step for a, b in points), (w.start, w.end)


def test_chp_steadiest_window_leaves_out_the_settling(chp_rec):
    _, window, _ = chp_rec
    assert window.start >= pd.Timestamp(_truth(CHP)["steady_from"], tz="UTC")


def _check_reconciled(rec, truth: dict) -> None:
    gt = rec.global_test
    assert gt["passed"] and gt["dof"] >= 3, gt
    for name, value in truth.items():
        u = rec.uncertainty(name)
        # Every instrument carries a fixed error of ~0.3 standard uncertainties and
        # the stated uncertainties cover them; 1.96 u (95 %) is the tolerance a
        # correct reconciliation must meet for each of these few quantities.
        assert abs(rec.value(name) - value) <= 1.96 * u, (name, rec.value(name), value, u)


def test_chiller_points_reconcile_and_pass_the_global_test(chiller_points):
    for p, rec in chiller_points:
        s = p["streams"]
        _check_reconciled(
            rec,
            {
                "evaporator.heat": p["units"]["evaporator.heat"],
                "condenser.heat": p["units"]["condenser.heat"],
                "JT-301": p["units"]["compressor.power"],
                "suction.mass_flow": s["suction"]["m"],
                "chw_supply.temperature": s["chw_supply"]["T"],
                "cw_out.temperature": s["cw_out"]["T"],
            },
        )


def test_chp_reconciles_and_passes_the_global_test(chp_rec):
    _, _, rec = chp_rec
    t = _truth(CHP)
    s = t["streams"]
    _check_reconciled(
        rec,
        {
            "boiler.heat": t["units"]["boiler.heat"],
            "turbine.power": t["units"]["turbine.power"],
            "process_steam.mass_flow": s["process_steam"]["m"],
            "process_steam.enthalpy": s["process_steam"]["h"],
            "tank_steam.mass_flow": s["tank_steam"]["m"],
            "exhaust.enthalpy": s["exhaust"]["h"],
        },
    )


def _evaluate(plant, rec):
    from perftest.evaluation.results import evaluate

    try:
        return evaluate(plant, rec)
    except PlantFileError as exc:
        if "is not evaluated" in str(exc):
            raise KindNotEvaluated(str(exc)) from exc
        raise


def _check_results(perf, truth: dict, names) -> None:
    res = perf.results
    for n in names:
        value, U95 = float(res.loc[n, "value"]), float(res.loc[n, "U95"])
        # Each result's own expanded uncertainty is the test's tolerance: the
        # logs' errors (fixed errors of ~0.3 u, slow drift, noise) sit inside it.
        assert abs(value - truth[n]) <= U95, (n, value, truth[n], U95)


def test_chiller_results_agree_with_truth_within_U95(chiller_run, chiller_points):
    plant, _ = chiller_run
    for p, rec in chiller_points:
        perf = _evaluate(plant, rec)
        _check_results(perf, p["results"], (*CHILLER_RESULTS, "corrected_cop"))
        _check_results(perf, p["results"], ("corrected_cooling_capacity",))
        if p["label"] == "100 %":
            g = perf.guarantees.set_index("quantity")
            # guaranteed at 97 % of the true corrected capacity (generate.py), more
            # than its U95 (about 1.5 %) below it
            assert g.loc["corrected_cooling_capacity", "verdict"] == "met"


def test_chp_results_agree_with_truth_within_U95(chp_rec):
    plant, _, rec = chp_rec
    t = _truth(CHP)
    perf = _evaluate(plant, rec)
    _check_results(perf, t["results"], (*CHP_RESULTS, "corrected_net_power"))
    g = perf.guarantees.set_index("quantity")
    # guaranteed at 97.5 % of the true corrected net power, well beyond its U95
    assert g.loc["corrected_net_power", "verdict"] == "met"


# --------------------------------------------------------------------------- demo and CLI
def test_default_scenario_is_the_steam_unit():
    assert demo.DEFAULT_SCENARIO == "brackenfold"
    assert demo.data_dir() == ROOT / "brackenfold"
    assert demo.get_scenario().files == ("historian.csv", "logger.csv")


@pytest.mark.parametrize("name", ["ostrenby", "wrenhollow"])
def test_scenario_files_are_bundled(name):
    sc = demo.get_scenario(name)
    folder = demo.data_dir(name)
    for f in (*sc.files, "plant.toml", "truth.json", "README.md", "generate.py"):
        assert (folder / f).is_file(), f
    assert _plant_table(folder)["performance"]["kind"] == sc.kind


@pytest.mark.parametrize("name", ["ostrenby", "wrenhollow"])
def test_demo_measurements_need_no_instrument_dropped(name):
    plant, m = demo.demo_measurements(name)
    sc = demo.get_scenario(name)
    if sc.start is not None:
        assert m.start == pd.Timestamp(sc.start, tz="UTC")
    rec = perftest.reconcile(plant, m, eliminate=True)
    # clean logs: serial elimination must find no gross error to remove
    assert rec.eliminated == () and rec.global_test["passed"]


def test_unknown_scenario_is_refused_with_the_names():
    names = "brackenfold, ostrenby, wrenhollow, quellmoor"
    with pytest.raises(InputError, match=f"{names}. Got .steam."):
        demo.run_demo("unused", scenario="steam")


def test_demo_help_lists_the_scenarios(capsys):
    from perftest.cli import main

    with pytest.raises(SystemExit) as exc:
        main(["demo", "--help"])
    assert exc.value.code == 0
    text = " ".join(capsys.readouterr().out.split())
    for name, sc in demo.SCENARIOS.items():
        assert name in text and f"kind {sc.kind}" in text


def test_unknown_scenario_on_the_command_line_exits_2(capsys, tmp_path):
    from perftest.cli import main

    assert main(["demo", "--scenario", "steam", "--out", str(tmp_path)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "ostrenby" in err[0]


@pytest.mark.parametrize("name", ["ostrenby", "wrenhollow"])
def test_demo_scenario_runs_end_to_end(name, tmp_path):
    outcome = demo.run_demo(tmp_path, scenario=name, figures=False)
    assert outcome.missing == []
    assert not outcome.failure
    summary = json.loads((tmp_path / "summary.json").read_text(encoding="utf-8"))
    assert summary["global_test"]["passed"]
    names = CHILLER_RESULTS if name == "ostrenby" else CHP_RESULTS
    assert set(names) <= set(summary["results"])
    assert np.isfinite([summary["results"][n]["U95"] for n in names]).all()


# --------------------------------------------------------------------------- docs
#: [performance] keys of each kind (DESIGN.md, "Plant kinds")
KIND_KEYS = {
    "power": {
        "gross_power",
        "auxiliary_power",
        "heat_input",
        "source_temperature",
        "sink_temperature",
        "cycle_heat",
        "basis",
    },
    "refrigeration": {
        "power_input",
        "cooling",
        "cold_temperature",
        "hot_temperature",
        "heat_rejected",
    },
    "heat_pump": {"power_input", "heating", "cold_temperature", "hot_temperature"},
}
KIND_KEYS["chp"] = KIND_KEYS["power"] | {"heat_export", "heat_return", "makeup"}


def _doc_examples() -> dict:
    text = (Path(__file__).resolve().parents[1] / "docs" / "plant-file.md").read_text("utf-8")
    section = text.split("## Plant kinds: one complete plant file each", 1)[1]
    out = {}
    for part in section.split("### `kind = ")[1:]:
        kind = part.split('"')[1]
        out[kind] = part.split("```toml\n", 1)[1].split("```", 1)[0]
    return out


def test_docs_have_one_example_per_kind():
    assert set(_doc_examples()) == {"power", "chp", "refrigeration", "heat_pump"}


@pytest.mark.parametrize("kind", ["power", "chp", "refrigeration", "heat_pump"])
def test_docs_example_plant_file_loads(kind, tmp_path):
    from perftest.plant.equations import build_model

    path = tmp_path / f"{kind}.toml"
    path.write_text(_doc_examples()[kind], encoding="utf-8")
    plant = perftest.load_plant(path)
    model = build_model(plant)  # streams and units form their balances
    assert len(model.rows) > 0
    perf = plant.sections["performance"]
    assert perf["kind"] == kind
    assert set(perf) - {"kind"} <= KIND_KEYS[kind]
    for ref in perf.values():  # every reference names a tag or a model variable
        if ref != kind and ref != "fuel":
            for r in [ref] if isinstance(ref, str) else ref:
                assert (
                    r in plant.tags
                    or r in plant.groups
                    or r in model.variables
                    or (r in plant.sections["streams"])
                ), r
