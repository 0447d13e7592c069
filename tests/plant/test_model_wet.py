"""A steam cycle whose turbine extraction is wet: reconcile(plant, measurements).

The extraction of tests/data/model/wet_extraction.toml is two-phase: its pressure is
measured, its temperature is the saturation temperature, and its flow and enthalpy
are both unmeasured, so the feedwater heater's energy balance holds the product of
two unknowns.  Such products make the linearisation poor far from the solution.

Outside checks used here:

* true plant states are synthesised with CoolProp's IAPWS-IF97 backend
  (``PropsSI(..., "IF97::Water")``), independently of the model's equations;
* the energy balances are recomputed in the test from the reconciled p, T, m (and
  the wet streams' enthalpies) with CoolProp;
* the reconciliation is compared with scipy.optimize (SLSQP) minimising the same
  weighted objective under the same constraints from the same starting point.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pytest
import scipy.optimize
from cycle_truth import IF97, T_ph, h_pT, steam_cycle

import perftest
from perftest.balance import reconcile_nonlinear
from perftest.errors import ReconciliationWarning
from perftest.plant.guess import initial_guess
from perftest.run.measurements import Measurements

PLANT = Path(__file__).resolve().parents[1] / "data" / "model" / "wet_extraction.toml"
SEED = 20250302


def sat(p, q):
    return CP.PropsSI("H", "P", p, "Q", q, IF97)


def truth():
    """Consistent true values of the cycle in tests/plant/cycle_truth.py.

    The extraction at 0.5 bar comes out at a quality of about 0.94, the exhaust at
    0.08 bar at about 0.88: both wet.
    """
    c = steam_cycle(p_ex=0.5e5, p_fw=105e5, T_fw=345.15, p_dr=0.45e5, T_dr=325.15)
    tags = {
        "FT-MS": c.m, "FT-FW": c.m, "FT-CD": c.m, "FT-DR": c.m_ex, "FT-CW": c.m_cw,
        "PT-MS": c.p_ms, "TT-MS": c.T_ms, "PT-EX": c.p_ex, "PT-EXH": c.p_exh,
        "PT-CD": c.p_cd, "TT-CD": c.T_cd, "PT-PO": c.p_po, "TT-PO": T_ph(c.p_po, c.h_po),
        "PT-FW": c.p_fw, "TT-FW": c.T_fw, "PT-DR": c.p_dr, "TT-DR": c.T_dr,
        "TT-CWI": c.T_cwi, "TT-CWO": c.T_cwo, "PT-CWI": c.p_cwi, "PT-CWO": c.p_cwo,
        "JT-GEN": c.P_t / 1.015, "JT-CP": c.m * (c.h_po - c.h_cd),
    }  # fmt: skip
    hidden = {
        "extraction.mass_flow": c.m_ex,
        "extraction.enthalpy": c.h_ex,
        "exhaust.enthalpy": c.h_exh,
        "exhaust.mass_flow": c.m - c.m_ex,
    }
    return tags, hidden


def uncertainty_of(tag: str, value: float) -> float:
    """Standard uncertainties of the synthetic instruments (invented, typical sizes)."""
    if tag[:2] in ("FT", "JT"):
        return 0.01 * value  # 1 % of reading
    if tag[:2] == "TT":
        return 0.2  # K
    return 0.005 * value  # pressures, 0.5 % of reading


def measurements(values: dict, seed=None) -> Measurements:
    tags = list(values)
    value = np.array([values[t] for t in tags])
    u = np.array([uncertainty_of(t, values[t]) for t in tags])
    if seed is not None:
        value = value + np.random.default_rng(seed).normal(size=value.size) * u
    return Measurements.from_values(tags, value, u)


@pytest.fixture(scope="module")
def plant():
    return perftest.load_plant(PLANT)


@pytest.fixture(scope="module")
def rec(plant):
    tags, _ = truth()
    return perftest.reconcile(plant, measurements(tags, seed=SEED))


def solver_inputs(rec):
    model = rec.model
    meas = rec.measurements
    idx = [meas.index(t) for t in model.measured]
    xm = np.asarray(meas.value)[idx]
    return model, xm, np.asarray(meas.u)[idx], np.asarray(meas.cov)[np.ix_(idx, idx)]


# --------------------------------------------------------------------------- tests
def test_wet_extraction_converges_and_is_observable(rec):
    r = rec.result
    assert r.converged and 1 <= r.iterations <= 10
    assert rec.global_test["passed"]
    un = rec.unmeasured.set_index("name")
    _, hidden = truth()
    for name, value in hidden.items():
        assert un.loc[name, "observable"], name
        u = un.loc[name, "u"]
        assert np.isfinite(u) and u > 0, name
        # The noise is random: the estimate lies within 4 of its standard
        # uncertainties of the truth (fails by chance with probability ~6e-5).
        assert abs(un.loc[name, "value"] - value) < 4 * u, name
    # The wet extraction sits on the saturation line and inside the dome.
    p = rec.value("extraction.pressure")
    assert rec.value("extraction.temperature") == pytest.approx(
        CP.PropsSI("T", "P", p, "Q", 0, IF97), abs=1e-6
    )  # K; the saturation row is solved to ~1e-9 K
    q = (rec.value("extraction.enthalpy") - sat(p, 0)) / (sat(p, 1) - sat(p, 0))
    assert 0.9 < q < 1.0


def test_energy_balances_close_with_coolprop(rec):
    st = rec.streams
    m, p, T = st["mass_flow"], st["pressure"], st["temperature"]
    h = {s: h_pT(p[s], T[s]) for s in st.index if st.loc[s, "phase"] != "wet"}
    for wet in ("extraction", "exhaust", "drain_flash"):
        assert T[wet] == pytest.approx(CP.PropsSI("T", "P", p[wet], "Q", 0, IF97), abs=1e-6)
        h[wet] = st.loc[wet, "enthalpy"]
        assert sat(p[wet], 0) < h[wet] < sat(p[wet], 1), wet
    P_t = rec.value("generator.power") * 1.015  # generator losses 1.5 % of output
    balances = {
        "turbine": (
            m["main_steam"] * h["main_steam"]
            - m["extraction"] * h["extraction"]
            - m["exhaust"] * h["exhaust"]
            - P_t,
            m["main_steam"] * h["main_steam"],
        ),
        "feed_heater": (
            m["extraction"] * (h["extraction"] - h["heater_drain"])
            - m["feedwater"] * (h["feedwater"] - h["pump_outlet"]),
            m["extraction"] * h["extraction"],
        ),
        "condenser": (
            m["exhaust"] * h["exhaust"]
            + m["drain_flash"] * h["drain_flash"]
            - m["condensate"] * h["condensate"]
            - m["cw_in"] * (h["cw_out"] - h["cw_in"]),
            m["exhaust"] * h["exhaust"],
        ),
        "valve": (h["heater_drain"] - h["drain_flash"], h["heater_drain"]),
    }
    for unit, (imbalance, size) in balances.items():
        # 1e-6 of the unit's energy throughput: the solver stops at 1e-8 of each
        # residual's standard deviation (~1e-9 relative here); the rest is IF97
        # rounding and the mK-level backward/forward inconsistency, which CoolProp's
        # h(p, T) does not have but leaves well below 1e-6.
        assert abs(imbalance) < 1e-6 * size, unit
    assert m["extraction"] == pytest.approx(m["heater_drain"], rel=1e-12)  # mass, to rounding


def test_agrees_with_scipy_slsqp(rec):
    """Same weighted objective and constraints, minimised by SLSQP from the same start."""
    model, xm, u, _ = solver_inputs(rec)
    y0 = initial_guess(model, xm)
    ys = np.maximum(np.abs(y0), 1.0)
    n = xm.size

    # Variables scaled to O(1): x = xm + u a, y = ys b (SLSQP is not scale invariant).
    def split(z):
        return xm + u * z[:n], ys * z[n:]

    def objective(z):
        return 0.5 * float(z[:n] @ z[:n])

    def gradient(z):
        return np.concatenate([z[:n], np.zeros(z.size - n)])

    def constraint_jac(z):
        Jx, Jy = model.jacobian(*split(z))
        return np.hstack([Jx.toarray() * u, Jy.toarray() * ys])

    sol = scipy.optimize.minimize(
        objective,
        np.concatenate([np.zeros(n), y0 / ys]),
        jac=gradient,
        constraints=[
            {"type": "eq", "fun": lambda z: model.residual(*split(z)), "jac": constraint_jac}
        ],
        method="SLSQP",
        options={"ftol": 1e-10, "maxiter": 200},
    )
    assert sol.success, sol.message
    x_s, y_s = split(sol.x)
    r = rec.result
    # SLSQP stops when the objective (~1 here) changes by less than ftol = 1e-10; the
    # objective is quadratic in the distance to the optimum (in units of u), so its x
    # can be off by ~sqrt(1e-10) = 1e-5 u; y likewise in units of their uncertainty.
    assert np.max(np.abs(x_s - r.x) / u) < 1e-5
    obs = r.observable
    assert np.max(np.abs(y_s[obs] - r.y[obs]) / r.y_u[obs]) < 1e-5
    # chi2 is twice the objective at the optimum (relative 1e-6: the 1e-5 u offset
    # above changes a sum of squares of O(1) terms by ~1e-5 * 1e-5 per term)
    assert 2 * objective(sol.x) == pytest.approx(rec.global_test["chi2"], rel=1e-6)


@pytest.mark.parametrize(
    "start",
    [
        {"extraction.mass_flow": 1e-3, "drain_flash.mass_flow": 1e-3},  # flow ~0
        {"extraction.mass_flow": 50.0, "extraction.enthalpy": 1.1e6},  # flow x9, quality 0.3
        {"extraction.mass_flow": 0.5, "extraction.enthalpy": 3.5e6, "exhaust.enthalpy": 1.0e6},
    ],
)
def test_far_starting_points_reach_the_same_solution(rec, start):
    """The pair (flow, enthalpy) of the extraction started far from the solution.

    The first start failed (ConvergenceError after 50 iterations) with the line search
    alone, which took the shortest trial step even when it increased the merit function.
    """
    model, xm, u, cov = solver_inputs(rec)
    y0 = initial_guess(model, xm)
    names = list(model.unmeasured)
    for name, value in start.items():
        y0[names.index(name)] = value

    def jacobian(x, y):
        Jx, Jy = model.jacobian(x, y)
        return Jx.toarray(), Jy.toarray()

    r = reconcile_nonlinear(model.residual, xm, cov, y0=y0, jacobian=jacobian)
    assert r.converged and r.iterations <= 15
    # Same optimum as from the model's own guess: both stop within 1e-8 u (the step
    # tolerance), so 1e-6 u leaves room for the last linearisation's rounding.
    assert np.max(np.abs(r.x - rec.result.x) / u) < 1e-6
    obs = rec.result.observable
    np.testing.assert_array_equal(r.observable, obs)
    assert np.max(np.abs(r.y[obs] - rec.result.y[obs]) / rec.result.y_u[obs]) < 1e-6


def test_without_drain_meter_the_pair_is_unobservable(plant, rec):
    """Without FT-DR the heater balance fixes only m_ex (h_ex - h_drain).

    The turbine, heater and condenser balances then sum to the cycle's overall
    balance, so extraction flow, extraction enthalpy and exhaust enthalpy are not
    determined.  At the starting point the guessed drain-flash enthalpy differs from
    the drain's, which makes the pair look barely observable there: the exact
    linearised step was ~1e4 times too long and the solver used to stop with a
    ConvergenceError after 50 iterations.
    """
    tags, _ = truth()
    del tags["FT-DR"]
    with pytest.warns(ReconciliationWarning, match="FT-DR"):
        out = perftest.reconcile(plant, measurements(tags, seed=SEED))
    r = out.result
    assert r.converged and r.iterations <= 10
    un = out.unmeasured.set_index("name")
    for name in ("extraction.mass_flow", "extraction.enthalpy", "exhaust.enthalpy"):
        assert not un.loc[name, "observable"], name
        assert np.isnan(out.value(name)), name
    # The overall balance still holds: the measured values are reconciled, with the
    # same redundancy as with the meter (FT-DR added a measurement and fixed one
    # unknown, so dof is unchanged), and the other unknowns are still found.
    assert r.dof == rec.result.dof
    assert un.loc["turbine.power", "observable"] and un.loc["condenser.heat", "observable"]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert np.isfinite(out.uncertainty("turbine.power"))
