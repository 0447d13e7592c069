"""Results of every plant kind, from small plant files through the reconciliation.

The measurements are generated here from states computed with CoolProp directly
(R134a by its default Helmholtz equation, water by CoolProp's IAPWS-IF97 backend),
so the truth does not come from perftest.  Each kind is checked three ways: against
that truth within U95, against a hand calculation from the reconciled values, and
(for the bounds) against textbook numbers.
"""

from __future__ import annotations

import math
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pytest

from perftest.balance.plant import reconcile
from perftest.errors import PlantFileError
from perftest.evaluation.results import evaluate
from perftest.plant.file import load_plant
from perftest.run.measurements import Measurements

DATA = Path(__file__).resolve().parents[1] / "data" / "plants"
C = 273.15


def _h(fluid, p, T):
    return CP.PropsSI("H", "P", p, "T", T, fluid)


def _T(fluid, p, h):
    # Solve h(p, T) = h with the forward equation: IF97's backward T(p, h) differs
    # from its forward equation by up to ~25 mK, which would show as a heat imbalance.
    from scipy.optimize import brentq

    t0 = CP.PropsSI("T", "P", p, "H", h, fluid)
    return brentq(lambda t: _h(fluid, p, t) - h, t0 - 1.0, t0 + 1.0, xtol=1e-12)


W = "IF97::Water"


def _measure(plant, values: dict, dof=math.inf):
    """Measurements at ``values`` [SI] with each tag's stated (systematic) uncertainty."""
    tags = list(values)
    u = [
        float(
            plant.tags[t].systematic_standard_uncertainty(values[t], atmospheric_pressure=101325.0)
        )
        for t in tags
    ]
    return Measurements.from_values(tags, [values[t] for t in tags], u, dof=dof)


# --------------------------------------------------------------------------- chiller


def chiller_truth(power=190e3):
    """A consistent operating point of the R134a chiller of chiller_r134a.toml.

    Evaporating at 4.5 degC with 5 K superheat, condensing at 36.5 degC with 3 K
    subcooling; 50 kg/s of chilled water from 12 to 7 degC; 55 kg/s of condenser
    water entering at 29.5 degC; hermetic compressor (all electrical power reaches
    the refrigerant).
    """
    R = "R134a"
    p1 = CP.PropsSI("P", "T", C + 4.5, "Q", 1, R)
    p2 = CP.PropsSI("P", "T", C + 36.5, "Q", 0, R)
    T1, T3 = C + 9.5, C + 33.5
    h1, h3 = _h(R, p1, T1), _h(R, p2, T3)
    m_w, Tr, Ts = 50.0, C + 12.0, C + 7.0
    q = m_w * (_h(W, 4.0e5, Tr) - _h(W, 3.5e5, Ts))
    m_r = q / (h1 - h3)
    h2 = h1 + power / m_r
    T2 = _T(R, p2, h2)
    q_rej = m_r * (h2 - h3)
    m_c, Tci = 55.0, C + 29.5
    Tco = _T(W, 2.5e5, _h(W, 3.0e5, Tci) + q_rej / m_c)
    values = {
        "PT-1": p1,
        "TT-1": T1,
        "PT-2": p2,
        "TT-2": T2,
        "TT-3": T3,
        "FT-10": m_w,
        "TT-10": Tr,
        "TT-11": Ts,
        "FT-20": m_c,
        "TT-20": Tci,
        "TT-21": Tco,
        "JT-1": power,
    }
    truth = {
        "cooling_capacity": q,
        "power_input": power,
        "heat_rejected": q_rej,
        "Tc": Ts,
        "Th": Tci,
    }
    return values, truth


@pytest.fixture(scope="module")
def chiller():
    plant = load_plant(DATA / "chiller_r134a.toml")
    values, truth = chiller_truth()
    # Instrument errors well inside their uncertainties, so the balances must move
    # the values: the wattmeter reads 0.3 % high, the chilled-water flow 0.5 % low.
    measured = dict(values, **{"JT-1": values["JT-1"] * 1.003, "FT-10": values["FT-10"] * 0.995})
    m = _measure(plant, measured, dof=30.0)
    rec = reconcile(plant, m)
    return plant, rec, evaluate(plant, rec, monte_carlo=False), truth, measured


def test_chiller_results_against_truth(chiller):
    _, _, perf, truth, _ = chiller
    r = perf.results
    # Truth from CoolProp states; the injected instrument errors are within the
    # stated uncertainties, so each result must lie within its U95 of the truth.
    cop = truth["cooling_capacity"] / truth["power_input"]
    carnot = truth["Tc"] / (truth["Th"] - truth["Tc"])
    for name, true in (
        ("cooling_capacity", truth["cooling_capacity"]),
        ("power_input", truth["power_input"]),
        ("heat_rejected", truth["heat_rejected"]),
        ("cop", cop),
        ("carnot_cop", carnot),
        ("second_law_efficiency", cop / carnot),
    ):
        assert abs(r.loc[name, "value"] - true) <= r.loc[name, "U95"], name
    for name in ("cop", "carnot_cop", "second_law_efficiency", "exergetic_efficiency"):
        assert r.loc[name, "unit"] == "1"
        assert r.loc[name, "u"] > 0
    assert r.loc["cooling_capacity", "unit"] == "W"


def test_chiller_results_against_hand_calculation(chiller):
    _, rec, perf, _, _ = chiller
    v = rec.value
    # Hand calculation from the reconciled values (definitions of DESIGN.md):
    q = v("chw_return.mass_flow") * (v("chw_return.enthalpy") - v("chw_supply.enthalpy"))
    q_rej = v("cdw_in.mass_flow") * (v("cdw_out.enthalpy") - v("cdw_in.enthalpy"))
    p = v("JT-1")
    tc, th = v("chw_supply.temperature"), v("cdw_in.temperature")
    T0 = rec.dead_state[0]
    cop = q / p
    carnot = tc / (th - tc)
    expected = {
        "cooling_capacity": q,
        "heat_rejected": q_rej,
        "power_input": p,
        "cop": cop,
        "carnot_cop": carnot,
        "second_law_efficiency": cop / carnot,
        # exergy of heat Q drawn at T below T0: Q (T0/T - 1)
        "cooling_exergy": q * (T0 / tc - 1.0),
        "exergetic_efficiency": q * (T0 / tc - 1.0) / p,
    }
    for name, value in expected.items():
        # The reconciled balances close to the solver tolerance (~1e-8 relative);
        # the evaluation reads the same reconciled numbers, so 1e-6 is ample.
        assert perf.value(name) == pytest.approx(value, rel=1e-6), name
    # The reconciled balance closes: cooling + power = heat rejected.
    assert q + p == pytest.approx(q_rej, rel=1e-6)


def test_chiller_raw_heat_balance_closure(chiller):
    plant, _, perf, _, measured = chiller
    # Hand calculation on the raw measurements (IF97 water enthalpies from CoolProp):
    # cooling from the chilled-water side, heat rejected from the condenser water.
    q = measured["FT-10"] * (_h(W, 4.0e5, measured["TT-10"]) - _h(W, 3.5e5, measured["TT-11"]))
    r = measured["FT-20"] * (_h(W, 2.5e5, measured["TT-21"]) - _h(W, 3.0e5, measured["TT-20"]))
    closure = (q + measured["JT-1"] - r) / r
    # perftest's water is IAPWS-IF97 too: the only difference is round-off (~1e-9 of
    # the heat flows), which becomes ~1e-8 of the closure.
    assert perf.value("heat_balance_closure") == pytest.approx(closure, abs=1e-6)
    # -0.5 % flow and +0.3 % power: about -0.2 % of the heat rejected.
    assert -0.004 < perf.value("heat_balance_closure") < 0.0
    assert perf.uncertainty("heat_balance_closure") > 0


def test_chiller_dof_and_coverage_factor_from_t(chiller):
    _, _, perf, _, _ = chiller
    r = perf.results
    # Every tag has 30 dof: Welch-Satterthwaite over a combination of them gives at
    # least 30 (GUM G.4, Eq. G.2b), and k from Student's t at those dof is above
    # the normal 1.96 (t_0.975(30) = 2.042, the largest it can be; GUM Table G.2
    # prints 2.04 for 95 % at 30 dof, from memory).
    from scipy import stats

    for name in ("cop", "cooling_capacity"):
        dof = r.loc[name, "dof"]
        assert 30.0 - 1e-9 <= dof < math.inf
        assert r.loc[name, "k"] == pytest.approx(stats.t.ppf(0.975, dof), rel=1e-9)
        assert 1.96 < r.loc[name, "k"] <= 2.043


def test_r134a_saturation_against_coolprop_and_table():
    from perftest.thermo import get_fluid

    fluid = get_fluid("R134a")
    # Saturation pressure [kPa] and latent heat hfg [kJ/kg] of R134a, Cengel & Boles,
    # Thermodynamics, Table A-11 (from memory): 0 degC 293.01 kPa, 198.60 kJ/kg;
    # 20 degC 572.07 kPa, 182.27 kJ/kg; 40 degC 1017.1 kPa, 163.02 kJ/kg.
    table = [(0.0, 293.01, 198.60), (20.0, 572.07, 182.27), (40.0, 1017.1, 163.02)]
    for t, p_kpa, hfg in table:
        T = C + t
        p = float(fluid.saturation_p(T))
        # Against CoolProp called directly: the same equation of state, so only
        # round-off separates them.
        assert p == pytest.approx(CP.PropsSI("P", "T", T, "Q", 0, "R134a"), rel=1e-9)
        # Against the printed table: its equation of state is an older fit and its
        # values are rounded; 0.2 % covers both.
        assert p / 1e3 == pytest.approx(p_kpa, rel=2e-3)
        hf = CP.PropsSI("H", "T", T, "Q", 0, "R134a")
        hg = CP.PropsSI("H", "T", T, "Q", 1, "R134a")
        assert (hg - hf) / 1e3 == pytest.approx(hfg, rel=2e-3)
        assert float(fluid.saturation_T(p)) == pytest.approx(T, abs=1e-6)


# --------------------------------------------------------------------------- CHP


def _s(p, T):
    return CP.PropsSI("S", "P", p, "T", T, W)


def chp_truth():
    """A consistent operating point of chp_steam_export.toml (IF97 water states).

    20 kg/s of steam at 40 bar and 450 degC; 8 kg/s leave for the process at 6 bar,
    12 kg/s expand to 10 kPa (both expansions 80 % isentropic); 5 kg/s of condensate
    come back at 90 degC, 3 kg/s of make-up at 15 degC; boiler 90 % efficient on a
    47 MJ/kg fuel; generator losses 1.5 % of the output; 0.6 MW auxiliaries.
    """
    p_ms, T_ms, m_ms = 40e5, C + 450.0, 20.0
    h_ms, s_ms = _h(W, p_ms, T_ms), _s(p_ms, T_ms)
    p_x = 6e5
    h_xs = CP.PropsSI("H", "P", p_x, "S", s_ms, W)
    h_x = h_ms - 0.8 * (h_ms - h_xs)
    T_x = _T(W, p_x, h_x)
    p_e = 10e3
    h_es = CP.PropsSI("H", "P", p_e, "S", _s(p_x, T_x), W)
    h_e = h_x - 0.8 * (h_x - h_es)
    m_x, m_e, m_r, m_m = 8.0, 12.0, 5.0, 3.0
    shaft = m_ms * h_ms - m_x * h_x - m_e * h_e
    gross = shaft / 1.015
    T_c, T_r, T_m = C + 44.0, C + 90.0, C + 15.0
    h_c, h_r, h_m = _h(W, 3e5, T_c), _h(W, 3e5, T_r), _h(W, 3e5, T_m)
    q_cond = m_e * (h_e - h_c)
    T_cw1, T_cw2 = C + 20.0, C + 28.0
    m_cw = q_cond / (_h(W, 2.0e5, T_cw2) - _h(W, 2.5e5, T_cw1))
    h_d = (m_e * h_c + m_r * h_r + m_m * h_m) / m_ms
    rho_d = CP.PropsSI("D", "P", 3e5, "H", h_d, W)
    h_fw = h_d + (40e5 - 3e5) / rho_d / 0.75
    T_fw = _T(W, 40e5, h_fw)
    q_boiler = m_ms * (h_ms - h_fw)
    fuel = q_boiler / 0.9 / 47e6
    aux = 0.6e6
    values = {
        "PT-101": p_ms,
        "TT-101": T_ms,
        "FT-101": m_ms,
        "PT-201": p_x,
        "TT-201": T_x,
        "FT-201": m_x,
        "PT-301": p_e,
        "TT-311": T_c,
        "FT-401": m_r,
        "TT-401": T_r,
        "TT-411": T_m,
        "TT-501": T_fw,
        "FT-601": m_cw,
        "TT-601": T_cw1,
        "TT-602": T_cw2,
        "JT-1": gross,
        "JT-2": aux,
        "FT-F": fuel,
    }
    T0, p0 = C + 15.0, 101325.0
    h0, s0 = _h(W, p0, T0), _s(p0, T0)

    def ex(p, T):
        return _h(W, p, T) - h0 - T0 * (_s(p, T) - s0)

    q_in = fuel * 47e6
    net = gross - aux
    heat_export = m_x * h_x - m_r * h_r - (m_x - m_r) * h_m
    ex_export = m_x * ex(p_x, T_x) - m_r * ex(3e5, T_r) - (m_x - m_r) * ex(3e5, T_m)
    truth = {
        "net_power": net,
        "heat_input": q_in,
        "first_law_efficiency": net / q_in,
        "heat_export": heat_export,
        "heat_export_exergy": ex_export,
        "fuel_utilisation": (net + heat_export) / q_in,
        "power_to_heat_ratio": net / heat_export,
        "exergetic_efficiency": (net + ex_export) / (1.04 * q_in),
        "cycle_heat": q_boiler,
        "cycle_efficiency": gross / q_boiler,
        "carnot_efficiency": 1 - T_cw1 / T_ms,
        "second_law_efficiency": gross / q_boiler / (1 - T_cw1 / T_ms),
    }
    return values, truth


@pytest.fixture(scope="module")
def chp():
    plant = load_plant(DATA / "chp_steam_export.toml")
    values, truth = chp_truth()
    # The export flow meter reads 0.6 % high and the condensate-return meter 1 % low:
    # within their stated uncertainties, so the results must stay within U95.
    measured = dict(
        values, **{"FT-201": values["FT-201"] * 1.006, "FT-401": values["FT-401"] * 0.99}
    )
    rec = reconcile(plant, _measure(plant, measured))
    return plant, rec, evaluate(plant, rec, monte_carlo=False), truth


def test_chp_results_against_truth(chp):
    _, _, perf, truth = chp
    r = perf.results
    for name, true in truth.items():
        assert abs(r.loc[name, "value"] - true) <= r.loc[name, "U95"], name
        assert r.loc[name, "u"] > 0, name
    assert r.loc["heat_export", "unit"] == "W"
    assert r.loc["fuel_utilisation", "basis"] == "lhv"
    assert r.loc["heat_input", "basis"] == "lhv"
    assert r.loc["carnot_efficiency", "basis"] == ""


def test_chp_results_against_hand_calculation(chp):
    _, rec, perf, _ = chp
    v = rec.value
    T0, p0 = rec.dead_state
    h0, s0 = _h(W, p0, T0), _s(p0, T0)

    def ex(sid):
        # flow exergy from the reconciled p and T, IF97 forward equations of CoolProp
        p, T = v(f"{sid}.pressure"), v(f"{sid}.temperature")
        return _h(W, p, T) - h0 - T0 * (_s(p, T) - s0)

    m_x, m_r = v("export_steam.mass_flow"), v("condensate_return.mass_flow")
    h = {s: v(f"{s}.enthalpy") for s in ("export_steam", "condensate_return", "makeup")}
    q_x = m_x * h["export_steam"] - m_r * h["condensate_return"] - (m_x - m_r) * h["makeup"]
    e_x = m_x * ex("export_steam") - m_r * ex("condensate_return") - (m_x - m_r) * ex("makeup")
    net = v("JT-1") - v("JT-2")
    q_in = v("FT-F") * 47e6
    expected = {
        "heat_export": q_x,
        "heat_export_exergy": e_x,
        "fuel_utilisation": (net + q_x) / q_in,
        "power_to_heat_ratio": net / q_x,
        "exergetic_efficiency": (net + e_x) / (1.04 * q_in),
        "cycle_heat": v("boiler.heat"),
        "cycle_efficiency": v("JT-1") / v("boiler.heat"),
    }
    for name, value in expected.items():
        # Same reconciled numbers; the hand exergy goes through CoolProp's IF97 with
        # T instead of perftest's (p, h), which agree to ~1e-9 relative; 1e-6 is ample.
        assert perf.value(name) == pytest.approx(value, rel=1e-6), name
    # the make-up flow is what the process did not return (mass balance of the plant)
    assert v("makeup.mass_flow") == pytest.approx(m_x - m_r, rel=1e-6)


def test_chp_exergy_account_closes_with_the_export(chp):
    _, _, perf, _ = chp
    # Every stream crossing the boundary is counted: the export is a product, so the
    # plant exergy balance closes (rtol 1e-3 of the fuel exergy, the account's own
    # tolerance) and no loss stands in for it.
    assert perf.exergy_closure is not None and perf.exergy_closure.closed
    assert abs(perf.exergy_closure.relative_imbalance) < 1e-3
    # the account's product and the result are the same exergy reached by two paths
    # of arithmetic, only round-off apart: 1e-6 is ample
    assert perf.exergy_products["heat export"] == pytest.approx(
        perf.value("heat_export_exergy"), rel=1e-6
    )
    assert not any("does not close" in n for n in perf.notes)


def test_mean_temperature_of_heat_addition_against_its_definition(chp):
    _, rec, perf, _ = chp
    # Definition: T_m = (integral of T ds) / (s2 - s1) along the heat addition; the
    # boiler of the test plant is isobaric (feedwater and main steam at 40 bar), so
    # T ds = dh and T_m = (h2 - h1) / integral(dh / T).  Integrate numerically over
    # IF97 states of CoolProp (through the boiling plateau) and compare.
    p = rec.value("main_steam.pressure")
    # The reconciled steam pressure moves by a few Pa from the fixed 40 bar of the
    # feedwater: v dp of ~1e-2 J/kg, nothing beside the 0.05 K below.
    assert rec.value("feedwater.pressure") == pytest.approx(p, rel=1e-5)
    h1, h2 = rec.value("feedwater.enthalpy"), rec.value("main_steam.enthalpy")
    hs = np.linspace(h1, h2, 4001)
    Ts = np.array([CP.PropsSI("T", "P", p, "H", h, W) for h in hs])
    ds = np.trapezoid(1.0 / Ts, hs)
    t_m = (h2 - h1) / ds
    # 4001 points: the trapezoid error is ~1e-7 relative; IF97's backward T(p, h)
    # adds up to ~25 mK, averaged out over the path.  0.05 K covers both.
    assert perf.value("heat_addition_mean_temperature") == pytest.approx(t_m, abs=0.05)
    # The split of the gap to Carnot adds up, and each part is positive here (the
    # two parts are a difference of the same four numbers: round-off only, 1e-9).
    r = perf.results["value"]
    assert r["carnot_gap_heat_transfer"] + r["carnot_gap_irreversibility"] == pytest.approx(
        r["carnot_efficiency"] - r["cycle_efficiency"], rel=1e-9
    )
    assert r["carnot_gap_heat_transfer"] > 0 and r["carnot_gap_irreversibility"] > 0
    assert r["heat_rejection_mean_temperature"] < r["heat_addition_mean_temperature"]


# --------------------------------------------------------------------------- heat pump


def heat_pump_truth(power=250e3):
    """Operating point of heat_pump_r134a.toml: source water 10 -> 6 degC (evaporating
    at 3 degC, 5 K superheat), heating water 40 -> 45 degC (condensing at 47 degC,
    3 K subcooling), 60 kg/s of source water."""
    R = "R134a"
    p1 = CP.PropsSI("P", "T", C + 3.0, "Q", 1, R)
    p2 = CP.PropsSI("P", "T", C + 47.0, "Q", 0, R)
    T1, T3 = C + 8.0, C + 44.0
    h1, h3 = _h(R, p1, T1), _h(R, p2, T3)
    m_w, Tr, Ts = 60.0, C + 10.0, C + 6.0
    q_cold = m_w * (_h(W, 4.0e5, Tr) - _h(W, 3.5e5, Ts))
    m_r = q_cold / (h1 - h3)
    h2 = h1 + power / m_r
    q_hot = m_r * (h2 - h3)
    Tci, Tco = C + 40.0, C + 45.0
    m_c = q_hot / (_h(W, 2.5e5, Tco) - _h(W, 3.0e5, Tci))
    values = {
        "PT-1": p1,
        "TT-1": T1,
        "PT-2": p2,
        "TT-2": _T(R, p2, h2),
        "TT-3": T3,
        "FT-10": m_w,
        "TT-10": Tr,
        "TT-11": Ts,
        "FT-20": m_c,
        "TT-20": Tci,
        "TT-21": Tco,
        "JT-1": power,
    }
    return values, {"heating_capacity": q_hot, "power_input": power, "Tc": Ts, "Th": Tco}


def test_heat_pump_results_against_truth_and_hand_calculation():
    plant = load_plant(DATA / "heat_pump_r134a.toml")
    values, truth = heat_pump_truth()
    measured = dict(values, **{"JT-1": values["JT-1"] * 0.997})
    rec = reconcile(plant, _measure(plant, measured))
    perf = evaluate(plant, rec, monte_carlo=False)
    r = perf.results
    cop = truth["heating_capacity"] / truth["power_input"]
    carnot = truth["Th"] / (truth["Th"] - truth["Tc"])
    for name, true in (
        ("heating_capacity", truth["heating_capacity"]),
        ("cop", cop),
        ("carnot_cop", carnot),
        ("second_law_efficiency", cop / carnot),
    ):
        assert abs(r.loc[name, "value"] - true) <= r.loc[name, "U95"], name
    v = rec.value
    q = v("heating_return.mass_flow") * (
        v("heating_supply.enthalpy") - v("heating_return.enthalpy")
    )
    tc, th, T0 = v("source_out.temperature"), v("heating_supply.temperature"), rec.dead_state[0]
    expected = {
        "heating_capacity": q,
        "cop": q / v("JT-1"),
        "carnot_cop": th / (th - tc),
        "second_law_efficiency": q / v("JT-1") / (th / (th - tc)),
        # exergy of heat Q delivered at T above T0: Q (1 - T0/T)
        "heating_exergy": q * (1 - T0 / th),
        "exergetic_efficiency": q * (1 - T0 / th) / v("JT-1"),
    }
    for name, value in expected.items():
        # same reconciled numbers, only round-off apart
        assert perf.value(name) == pytest.approx(value, rel=1e-6), name
    assert "heat_balance_closure" not in r.index
    # The heated water's exergy is the product of the exergy account, which closes.
    assert perf.exergy_closure.closed
    assert perf.exergy_products["heating"] > 0


# --------------------------------------------------------------------------- textbook bounds

# A bench plant of four tags (work and heat in kW, two temperatures in K); its
# [performance] keys follow.
_BENCH_TAGS = """
[site]
name = "Bench"
[tags.JT]
unit = "kW"
[tags.QT]
unit = "kW"
[tags.TC]
unit = "K"
[tags.TH]
unit = "K"
[performance]
"""


def test_carnot_cop_textbook_examples(tmp_path):
    # Reversible machines between stated temperatures, computed through evaluate().
    # Cengel & Boles, Thermodynamics, Ch. 6, the worked example of a Carnot heat pump
    # keeping a house at 21 degC with -5 degC outside: COP_HP,rev = 294/26 = 11.3
    # (from memory).  The refrigerator uses the relation of the same section,
    # COP_R,rev = T_L/(T_H - T_L), between -3 degC and 22 degC: 270/25 = 10.8.  A
    # machine with half the reversible COP has a second-law efficiency of 0.5
    # (eta_II = COP/COP_rev, Cengel & Boles Ch. 8; from memory).
    for kind, load, tc, th, carnot in (
        ("refrigeration", "cooling", 270.0, 295.0, 10.8),
        ("heat_pump", "heating", 268.0, 294.0, 294.0 / 26.0),
    ):
        path = tmp_path / f"{kind}.toml"
        path.write_text(
            _BENCH_TAGS
            + f"""kind = "{kind}"
power_input = "JT"
{load} = "QT"
cold_temperature = "TC"
hot_temperature = "TH"
""",
            encoding="utf-8",
        )
        from standin import StandIn

        q = 100e3
        values = {"JT": q / (carnot / 2), "QT": q, "TC": tc, "TH": th}
        perf = evaluate(load_plant(path), StandIn(values, {k: 1e-3 for k in values}))
        # exact arithmetic: only rounding of the printed examples (3 digits)
        assert perf.value("carnot_cop") == pytest.approx(carnot, rel=1e-3), kind
        assert perf.value("second_law_efficiency") == pytest.approx(0.5, rel=1e-9), kind
        assert perf.value("cop") == pytest.approx(carnot / 2, rel=1e-9), kind


def test_exergy_of_heat_against_textbook_relation():
    from perftest.evaluation.performance import heat_exergy

    # Exergy of heat Q at T: Q (1 - T0/T) (Cengel & Boles, Sect. 8-2, from memory):
    # 100 kW at 600 K with T0 = 300 K carries 50 kW; drawn at 250 K (below T0) the
    # heat carries Q (T0/T - 1) = 20 kW the other way.
    assert heat_exergy(100e3, 600.0, 300.0) == pytest.approx(50e3, rel=1e-12)
    assert -heat_exergy(100e3, 250.0, 300.0) == pytest.approx(20e3, rel=1e-12)


# --------------------------------------------------------------------------- plant-file keys


@pytest.mark.parametrize(
    ("performance", "match"),
    [
        ('kind = "fridge"', "must be one of"),
        (
            'kind = "refrigeration"\npower_input = "JT"\ncooling = "QT"\ncold_temperature = "TC"',
            "needs 'hot_temperature'",
        ),
        (
            'kind = "heat_pump"\npower_input = "JT"\nheating = "QT"\ncold_temperature = "TC"\n'
            'hot_temperature = "TH"\ngross_power = "JT"',
            "'gross_power' is not a key of kind",
        ),
        (
            'kind = "refrigeration"\npower_input = 3\ncooling = "QT"\ncold_temperature = "TC"\n'
            'hot_temperature = "TH"',
            "power_input'.*must be",
        ),
        (
            'kind = "refrigeration"\npower_input = "JT"\ncooling = "QX"\ncold_temperature = "TC"\n'
            'hot_temperature = "TH"',
            "neither a tag",
        ),
    ],
)
def test_performance_keys_of_each_kind(tmp_path, performance, match):
    from standin import StandIn

    path = tmp_path / "plant.toml"
    path.write_text(_BENCH_TAGS + performance + "\n", encoding="utf-8")
    values = {"JT": 1e5, "QT": 4e5, "TC": 280.0, "TH": 300.0}
    with pytest.raises(PlantFileError, match=match) as info:
        evaluate(load_plant(path), StandIn(values, {k: 1.0 for k in values}))
    # the error names the plant file's line
    assert "line" in str(info.value)


# --------------------------------------------------------------------------- guarantees


_BENCH = (
    _BENCH_TAGS
    + """kind = "refrigeration"
power_input = "JT"
cooling = "QT"
cold_temperature = "TC"
hot_temperature = "TH"
"""
)
_BENCH_VALUES = {"JT": 100e3, "QT": 500e3, "TC": 280.0, "TH": 303.0}


def _bench(tmp_path, extra):
    from standin import StandIn

    path = tmp_path / "plant.toml"
    path.write_text(_BENCH + extra, encoding="utf-8")
    u = {"JT": 500.0, "QT": 5e3, "TC": 0.05, "TH": 0.05}
    return evaluate(load_plant(path), StandIn(_BENCH_VALUES, u), monte_carlo=False)


_CORR = """
[[corrections]]
result = "{result}"
variable = "TH"
reference = {{ value = 303.0, unit = "K" }}
kind = "multiplicative"
curve = {{ x = [293.0, 303.0, 313.0], y = [{y0}, 1.0, 0.9], x_unit = "K" }}
"""


@pytest.mark.parametrize(
    ("unit", "value"), [("kW/kW", 4.8), ("1", 4.8), ("MW", 0.49), ("kW", 490.0)]
)
def test_guarantee_of_any_result_with_a_fitting_unit(tmp_path, unit, value):
    quantity = "corrected_cop" if unit in ("kW/kW", "1") else "corrected_cooling_capacity"
    result = quantity.removeprefix("corrected_")
    perf = _bench(
        tmp_path,
        _CORR.format(result=result, y0=1.1)
        + f'[[guarantees]]\nquantity = "{quantity}"\nvalue = {value}\nunit = "{unit}"\n'
        'direction = "at_least"\n',
    )
    g = perf.guarantees.iloc[0]
    # at the reference condition the factor is 1: COP 5.0 and 500 kW, both above
    # the guaranteed values by more than their U95 (about 1 %)
    assert g["verdict"] == "met"
    assert perf.value(quantity) == pytest.approx(perf.value(result), rel=1e-12)


@pytest.mark.parametrize(
    ("guarantee", "match"),
    [
        ('quantity = "cop"\nvalue = 4.8\nunit = "MW"', "does not fit 'cop'"),
        ('quantity = "cooling_capacity"\nvalue = 4.8\nunit = "kW/kW"', "does not fit"),
        (
            'quantity = "cop"\nvalue = 4.8\nrule = "tolerance"\n'
            'tolerance = { value = 1.0, unit = "degC" }',
            "tolerance unit 'degC' does not fit",
        ),
    ],
)
def test_guarantee_unit_must_fit_the_result(tmp_path, guarantee, match):
    with pytest.raises(PlantFileError, match=match) as info:
        _bench(tmp_path, f'[[guarantees]]\n{guarantee}\ndirection = "at_least"\n')
    assert "line" in str(info.value)


def test_heat_rate_guarantee_in_mw_is_refused(tmp_path):
    # issue case: a heat rate guaranteed "in MW" was accepted and changed the verdict
    from standin import StandIn

    path = tmp_path / "plant.toml"
    path.write_text(
        """
[site]
name = "Bench"
[tags.JT]
unit = "MW"
[tags.QT]
unit = "MW"
[tags.TS]
unit = "K"
[tags.TK]
unit = "K"
[performance]
gross_power = "JT"
heat_input = "QT"
source_temperature = "TS"
sink_temperature = "TK"
[[guarantees]]
quantity = "heat_rate"
value = 9.5
unit = "MW"
direction = "at_most"
""",
        encoding="utf-8",
    )
    values = {"JT": 30e6, "QT": 80e6, "TS": 800.0, "TK": 300.0}
    with pytest.raises(PlantFileError, match="heat_rate"):
        evaluate(load_plant(path), StandIn(values, {k: 1e-3 * v for k, v in values.items()}))


def test_multiplicative_curve_reaching_zero_is_refused(tmp_path):
    with pytest.raises(PlantFileError, match="must be positive") as info:
        _bench(tmp_path, _CORR.format(result="cop", y0=0.0))
    assert "line" in str(info.value)


def test_correction_given_twice_is_refused(tmp_path):
    twice = _CORR.format(result="cop", y0=1.1) * 2
    with pytest.raises(PlantFileError, match="a second time"):
        _bench(tmp_path, twice)


# --------------------------------------------------------------------------- plan


@pytest.mark.parametrize(
    ("name", "headline"),
    [
        ("chiller_r134a.toml", ("cooling_capacity", "cop", "carnot_cop")),
        ("chp_steam_export.toml", ("heat_export", "fuel_utilisation", "power_to_heat_ratio")),
    ],
)
def test_plan_works_for_every_kind(name, headline):
    from perftest.planning.prediction import plan

    tp = plan(DATA / name, what_if=False)
    res = tp.results
    for h in headline:
        assert h in res.index, h
        # reconciliation cannot make a result less certain than the raw calculation
        # (it adds information); 1e-9 allows for round-off
        assert res.loc[h, "U95_with"] <= res.loc[h, "U95_without"] * (1 + 1e-9), h
        assert res.loc[h, "U95_with"] > 0, h
    allowed = res.dropna(subset=["U95_allowed"])
    assert len(allowed) == 1 and allowed["within_allowed"].iloc[0] in (True, False)


# --------------------------------------------------------------------------- monitor


def _chiller_csv(path, minutes=60):
    """A run file of the chiller around its design point, in the logged units."""
    import pandas as pd

    values, _ = chiller_truth()
    rng = np.random.default_rng(3)
    times = pd.date_range("2031-07-01 10:00", periods=minutes, freq="1min")
    # Small sample scatter about the design point (well inside the instruments'
    # uncertainties): every window must reconcile and give the truth within U95.
    scale = {"PT": 0.0005, "TT": 0.0, "FT": 0.002, "JT": 0.002}
    cols = {}
    for tag, v in values.items():
        x = v * (1 + scale[tag[:2]] * rng.standard_normal(times.size))
        if tag.startswith("TT"):
            x = v - C + 0.01 * rng.standard_normal(times.size)  # degC, as logged
        elif tag.startswith("PT"):
            x = x / 1e5  # bar
        elif tag.startswith("JT"):
            x = x / 1e3  # kW
        cols[tag] = x
    pd.DataFrame(cols, index=pd.Index(times, name="time")).to_csv(path, float_format="%.6f")
    return path


def test_monitor_trends_the_chiller_headline_results(tmp_path):
    import json

    import pandas as pd

    from perftest.scale.monitor import monitor

    _, truth = chiller_truth()
    path = _chiller_csv(tmp_path / "chiller.csv")
    info = monitor(
        DATA / "chiller_r134a.toml", [path], tmp_path / "out", every="30min", figure=False
    )
    assert info["windows"]["ok"] == 2
    table = pd.read_csv(tmp_path / "out" / "windows.csv")
    for name in ("cooling_capacity", "power_input", "cop", "carnot_cop", "second_law_efficiency"):
        assert name in table.columns and f"u_{name}" in table.columns, name
    cop = truth["cooling_capacity"] / truth["power_input"]
    # 2 u is about U95 (large dof)
    assert (abs(table["cop"] - cop) <= 2.0 * table["u_cop"]).all()
    json.loads((tmp_path / "out" / "monitor.json").read_text())


def test_monte_carlo_check_agrees_for_chp_results(chp):
    plant, rec, _, _ = chp
    perf = evaluate(plant, rec, monte_carlo=True)
    mc = perf.monte_carlo
    # 20 000 trials estimate u to about 0.5 % (1/sqrt(2M)); the results are smooth
    # over a few u of their inputs, so linear and Monte Carlo agree within 3 %.
    for name in ("heat_export", "fuel_utilisation", "exergetic_efficiency", "cycle_efficiency"):
        assert mc.loc[name, "ratio"] == pytest.approx(1.0, abs=0.03), name


def test_hhv_basis_is_stated_on_every_heating_value_result(tmp_path):
    text = (DATA / "chp_steam_export.toml").read_text(encoding="utf-8")
    text = text.replace(
        'lhv = { value = 47.0, unit = "MJ/kg" }', 'hhv = { value = 52.0, unit = "MJ/kg" }'
    )
    text = text.replace('makeup = "makeup"\n', 'makeup = "makeup"\nbasis = "hhv"\n', 1)
    path = tmp_path / "chp_hhv.toml"
    path.write_text(text, encoding="utf-8")
    plant = load_plant(path)
    values, _ = chp_truth()
    rec = reconcile(plant, _measure(plant, values))
    perf = evaluate(plant, rec, monte_carlo=False)
    r = perf.results
    for name in ("heat_input", "first_law_efficiency", "heat_rate", "fuel_utilisation"):
        assert r.loc[name, "basis"] == "hhv", name
    # heat input on the stated HHV: fuel flow x 52 MJ/kg (exact arithmetic)
    assert perf.value("heat_input") == pytest.approx(rec.value("FT-F") * 52e6, rel=1e-12)
    assert r.loc["cycle_efficiency", "basis"] == ""


def test_report_command_writes_the_chiller_results(tmp_path, capsys):
    import json

    from perftest.cli import main

    data = _chiller_csv(tmp_path / "chiller.csv", minutes=150)
    out = tmp_path / "summary.json"
    rc = main(["report", str(DATA / "chiller_r134a.toml"), "--data", str(data), "--json", str(out)])
    assert rc in (0, None)
    results = json.loads(out.read_text())["results"]
    _, truth = chiller_truth()
    cop = truth["cooling_capacity"] / truth["power_input"]
    assert abs(results["cop"]["value"] - cop) <= results["cop"]["U95"]
    for name in ("cooling_capacity", "carnot_cop", "second_law_efficiency", "heat_balance_closure"):
        assert set(results[name]) >= {"value", "u", "U95", "unit", "k", "dof"}, name
    assert "COP" in capsys.readouterr().out


@pytest.mark.parametrize(
    ("kind", "fragment"),
    [
        ("power", "cycle / Carnot"),
        ("chp", "cycle / Carnot"),
        ("refrigeration", "COP / Carnot COP"),
        ("heat_pump", "COP / Carnot COP"),
    ],
)
def test_second_law_description_names_the_kind_s_definition(kind, fragment):
    # A report must not describe a chiller's COP/Carnot COP as a cycle efficiency
    # ratio: the description follows the definition of the kind (DESIGN contract).
    from perftest.evaluation import kinds

    assert fragment in kinds.describe("second_law_efficiency", kind)
    assert fragment in kinds.describe("corrected_second_law_efficiency", kind)
