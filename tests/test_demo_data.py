"""The bundled demo scenario (sample_data/brackenfold) is consistent.

The generator solves its heat balance with CoolProp's IF97 backend.  These tests
recompute every stream state with the independent ``iapws`` package (IAPWS-IF97,
W. Wagner et al., "The IAPWS Industrial Formulation 1997 for the Thermodynamic
Properties of Water and Steam", J. Eng. Gas Turbines Power 122 (2000) 150-182,
DOI 10.1115/1.483186) and close the mass and energy balances by hand.
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

iapws = pytest.importorskip("iapws")

DATA = Path(__file__).resolve().parents[1] / "sample_data" / "brackenfold"


@pytest.fixture(scope="module")
def truth():
    return json.loads((DATA / "truth.json").read_text(encoding="utf-8"))


def _h_iapws(stream: dict) -> float:
    """Specific enthalpy [J/kg] by iapws from (p, T), or (p, x) for a wet stream."""
    p_mpa = stream["p"] / 1e6
    if stream["x"] is not None:
        return iapws.IAPWS97(P=p_mpa, x=stream["x"]).h * 1e3
    return iapws.IAPWS97(P=p_mpa, T=stream["T"]).h * 1e3


def test_stream_enthalpies_match_iapws(truth):
    for name, s in truth["streams"].items():
        # Two implementations of the same IF97 equations agree to ~1e-8 relative;
        # 1e-6 leaves room for the backward equations used by the (p, x) route.
        assert _h_iapws(s) == pytest.approx(s["h"], rel=1e-6), name


def test_exhaust_is_wet_and_other_streams_single_phase(truth):
    s = truth["streams"]
    assert 0.8 < s["exhaust"]["x"] < 0.95  # typical last-stage wetness (common practice)
    for name in ("main_steam", "extraction"):
        t_sat = iapws.IAPWS97(P=s[name]["p"] / 1e6, x=1.0).T
        assert s[name]["T"] > t_sat + 5.0, f"{name} must be superheated"
    for name in ("condensate", "pump_discharge", "feedwater", "heater_drain", "cw_in", "cw_out"):
        t_sat = iapws.IAPWS97(P=s[name]["p"] / 1e6, x=0.0).T
        assert s[name]["T"] < t_sat - 0.5, f"{name} must be subcooled liquid"


def test_mass_balances_close(truth):
    m = {k: v["m"] for k, v in truth["streams"].items()}
    # Mass flows are products of one solve; closure to rounding (1e-12 relative).
    assert m["main_steam"] == pytest.approx(m["extraction"] + m["exhaust"], rel=1e-12)
    assert m["condensate"] == pytest.approx(m["exhaust"] + m["heater_drain"], rel=1e-12)
    assert m["feedwater"] == pytest.approx(m["main_steam"], rel=1e-12)
    assert m["pump_discharge"] == pytest.approx(m["condensate"], rel=1e-12)
    assert m["heater_drain"] == pytest.approx(m["extraction"], rel=1e-12)
    assert m["cw_in"] == pytest.approx(m["cw_out"], rel=1e-12)


def test_energy_balances_close_with_iapws_enthalpies(truth):
    s = truth["streams"]
    h = {k: _h_iapws(v) for k, v in s.items()}
    m = {k: v["m"] for k, v in s.items()}
    u = truth["units"]
    # Residuals relative to the turbine inlet energy flow (~120 MW); the two IF97
    # implementations differ by < 1e-8, so 1e-6 is a generous bound.
    scale = m["main_steam"] * h["main_steam"]
    turbine = m["main_steam"] * h["main_steam"] - m["extraction"] * h["extraction"]
    turbine -= m["exhaust"] * h["exhaust"] + u["turbine.power"]
    heater = m["extraction"] * (h["extraction"] - h["heater_drain"])
    heater -= m["feedwater"] * (h["feedwater"] - h["pump_discharge"])
    condenser = m["exhaust"] * h["exhaust"] + m["heater_drain"] * h["heater_drain"]
    condenser -= m["condensate"] * h["condensate"] + m["cw_in"] * (h["cw_out"] - h["cw_in"])
    boiler = m["feedwater"] * (h["main_steam"] - h["feedwater"]) - u["boiler.heat"]
    pump = m["condensate"] * (h["pump_discharge"] - h["condensate"]) - u["pump.power"]
    for name, r in dict(
        turbine=turbine, heater=heater, condenser=condenser, boiler=boiler, pump=pump
    ).items():
        assert abs(r) / scale < 1e-6, name
    # The cycle as a whole: heat in = shaft work + heat rejected - pump work.
    cycle = u["boiler.heat"] - u["turbine.power"] - u["condenser.heat"] + u["pump.power"]
    assert abs(cycle) / scale < 1e-6


def test_results_arithmetic(truth):
    r = truth["results"]
    # Exact arithmetic identities of the definitions (rounding only).
    assert r["net_power"] == pytest.approx(r["gross_power"] - r["auxiliary_power"], rel=1e-12)
    assert r["first_law_efficiency"] == pytest.approx(r["net_power"] / r["heat_input"], 1e-12)
    assert r["heat_rate"] == pytest.approx(1.0 / r["first_law_efficiency"], rel=1e-12)
    assert r["carnot_efficiency"] == pytest.approx(
        1 - r["sink_temperature"] / r["source_temperature"], rel=1e-12
    )
    # heat engine: cycle efficiency (gross power / heat absorbed) against Carnot
    assert r["cycle_efficiency"] == pytest.approx(
        r["gross_power"] / truth["units"]["boiler.heat"], rel=1e-12
    )
    assert r["second_law_efficiency"] == pytest.approx(
        r["cycle_efficiency"] / r["carnot_efficiency"], rel=1e-12
    )
    # Plausibility against trade figures (common practice, no source): a small
    # single-heater condensing unit runs at 28-36 % net efficiency, a gas boiler at
    # 85-95 % (LHV), and pipeline natural gas has an LHV of 45-50 MJ/kg.
    assert 0.28 < r["first_law_efficiency"] < 0.36
    boiler_eff = truth["units"]["boiler.heat"] / r["heat_input"]
    assert 0.85 < boiler_eff < 0.95
    assert 45e6 < truth["fuel"]["lhv"] < 50e6
    # Heat input = fuel flow x LHV.
    assert r["heat_input"] == pytest.approx(
        truth["fuel"]["mass_flow"] * truth["fuel"]["lhv"], rel=1e-12
    )


def _historian():
    frame = pd.read_csv(DATA / "historian.csv", skiprows=[1], index_col=0, parse_dates=True)
    return frame.apply(pd.to_numeric, errors="coerce")


def test_historian_layout_and_planted_faults(truth):
    units = pd.read_csv(DATA / "historian.csv", nrows=1, index_col=0).iloc[0]
    assert units["PT-101"] == "barg" and units["FT-101"] == "t/h" and units["PT-131"] == "kPa(a)"
    h = _historian()
    assert len(h) == 240 and (h.index[1] - h.index[0]) == pd.Timedelta("1min")
    steady = h.loc["2026-05-14 10:00":"2026-05-14 11:59"]
    # FT-171 was made to read 3 % high; the window mean of 120 samples with 0.3 %
    # noise lands within +-0.5 % of that.
    ratio = steady["FT-171"].mean() / steady["FT-101"].mean()
    assert ratio == pytest.approx(1.03, abs=0.005)
    # Bad samples are there as written.
    raw = pd.read_csv(DATA / "historian.csv", skiprows=[1], index_col=0, dtype=str)
    assert raw.loc["2026-05-14 10:17:00", "PT-101"] == "Bad"
    assert pd.isna(raw.loc["2026-05-14 10:42:00", "TT-171"])
    assert raw.loc["2026-05-14 11:05:00", "FT-161"] == "-9999"
    # The unit settles during the first hour: load lower at 08:00 than at 10:00.
    assert h["JT-101A"].iloc[:5].mean() < 0.98 * steady["JT-101A"].mean()


def test_logger_uses_semicolons_and_decimal_commas(truth):
    log = pd.read_csv(DATA / "logger.csv", sep=";", decimal=",", index_col=0, parse_dates=True)
    assert list(log.columns) == ["TT-181", "TT-182", "JT-101B"]
    assert (log.index[1] - log.index[0]) == pd.Timedelta("5s")
    steady = log.loc["2026-05-14 10:00":"2026-05-14 11:59"]
    t_in = truth["results"]["sink_temperature"] - 273.15
    # 0.02 K noise on 1440 samples plus a systematic error of 0.3 u (0.015 K):
    # the window mean sits within 0.05 K of the truth.
    assert steady["TT-181"].mean() == pytest.approx(t_in, abs=0.05)
    # The test wattmeter logs kW, the historian's station meter MW; both read the
    # same generator (0.3 % stated accuracy, so 0.5 % is their agreement limit).
    mw = _historian().loc["2026-05-14 10:00":"2026-05-14 11:59", "JT-101A"].mean()
    assert steady["JT-101B"].mean() / 1e3 == pytest.approx(mw, rel=0.005)
    assert log["TT-182"].isna().sum() == 1
    # The planted spike: one 5 s sample 3 K above its neighbours (noise 0.03 K).
    near = log.loc["2026-05-14 10:35":"2026-05-14 10:37", "TT-182"]
    assert near.loc["2026-05-14 10:36:05"] - near.median() > 2.5


def test_generator_is_deterministic(tmp_path):
    spec = importlib.util.spec_from_file_location("brackenfold_generate", DATA / "generate.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    module.main(tmp_path)
    for name in ("plant.toml", "historian.csv", "logger.csv", "truth.json"):
        assert (tmp_path / name).read_bytes() == (DATA / name).read_bytes(), name


def test_plant_file_loads():
    perftest = pytest.importorskip("perftest")
    plant = perftest.load_plant(DATA / "plant.toml")
    assert set(plant.groups["JT-101"].tags) == {"JT-101A", "JT-101B"}
    assert np.isclose(len(plant.tags), 25)
