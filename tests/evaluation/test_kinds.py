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
    # the normal 1.96 (t_0.975(30) = 2.042, the largest it can be).
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
