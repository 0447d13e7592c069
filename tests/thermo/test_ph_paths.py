"""States from (p, h) and (p, s) of IF97 water: the stacked Newton steps and the lean path.

The Newton refinement of IF97's backward temperature evaluates the states of every
side of the saturation line in one CoolProp array call per step; states far from
the line skip the saturation equation (a bracket of Tsat(p) on a grid decides).
Outside checks: CoolProp's point-by-point ``AbstractState.update`` and the forward
equation of the ``iapws`` package (IAPWS R7-97(2012), Eq. 7 and 15), which must
reproduce the given enthalpy or entropy at the returned temperature; and the full
saturation rules of the same module, which the lean path must match bit for bit.
"""

from __future__ import annotations

import warnings

import CoolProp.CoolProp as CP
import iapws
import numpy as np
import pytest

from perftest.errors import PropertyRangeError
from perftest.plant import states as plant_states
from perftest.thermo import inverse
from perftest.thermo.if97 import P_CRITICAL, P_TRIPLE, if97_tsat
from perftest.thermo.properties import get_fluid

WATER = get_fluid("water")
RNG_SEED = 20261205
FIELDS = ("p", "T", "h", "s", "cp", "rho", "x", "dh_dT_p", "dh_dp_T")


def _h_pT(p, T):
    """Enthalpy [J/kg] from CoolProp IF97 point updates."""
    state = CP.AbstractState("IF97", "Water")
    out = []
    for pi, Ti in zip(p, T, strict=True):
        state.update(CP.PT_INPUTS, pi, Ti)
        out.append(state.hmass())
    return np.array(out)


def _far_states(n, rng, supercritical=True):
    """(p, h) of liquid, steam and supercritical states at least 1 K from saturation."""
    p = np.exp(rng.uniform(np.log(2e3), np.log(2.2e7), n))
    ts = if97_tsat(p)
    T = np.where(
        np.arange(n) % 2 == 0,
        np.maximum(ts - rng.uniform(1.0, 80.0, n), 274.0),
        np.minimum(ts + rng.uniform(1.0, 400.0, n), 1070.0),
    )
    if supercritical:  # regions 1-3 above the critical pressure
        p = np.concatenate((p, rng.uniform(2.3e7, 6e7, 20)))
        T = np.concatenate((T, rng.uniform(300.0, 1000.0, 20)))
    return p, _h_pT(p, T)


def _assert_same_state(a, b):
    for k in FIELDS:
        np.testing.assert_array_equal(getattr(a, k), getattr(b, k), err_msg=k)


# --------------------------------------------------------------------------------------
# values against CoolProp point updates and the iapws package
# --------------------------------------------------------------------------------------
def test_far_states_reproduce_h_and_read_coolprop_at_T():
    rng = np.random.default_rng(RNG_SEED)
    p, h = _far_states(60, rng)
    st = WATER.state_ph(p, h)
    state = CP.AbstractState("IF97", "Water")
    for i in range(p.size):
        state.update(CP.PT_INPUTS, p[i], st.T[i])
        # the Newton steps stop at |dT| < 1e-9 T: h(p, T(p, h)) = h to 1e-9 relative
        # (IF97's backward T alone is off by up to 25 mK, about 1e-4 in h)
        assert state.hmass() == pytest.approx(h[i], rel=1e-9)
        # exact: the array call evaluates each state with the point update's functions
        assert (st.s[i], st.cp[i], st.rho[i]) == (state.smass(), state.cpmass(), state.rhomass())
        dp = 1e-5 * p[i]  # the central difference of perftest.thermo.backend
        state.update(CP.PT_INPUTS, p[i] + dp, st.T[i])
        hp = state.hmass()
        state.update(CP.PT_INPUTS, p[i] - dp, st.T[i])
        assert st.dh_dp_T[i] == (hp - state.hmass()) / (2.0 * dp)
    assert np.isnan(st.x).all()


def test_T_against_the_forward_equation_of_iapws():
    # regions 1 and 2 (in region 3 CoolProp's (p, T) goes through the backward
    # v(p, T) of IAPWS SR5-05, which the iapws package does not use: ~1e-7 apart)
    rng = np.random.default_rng(RNG_SEED + 1)
    p, h = _far_states(12, rng, supercritical=False)
    st = WATER.state_ph(p, h)
    for pi, hi, Ti, si in zip(p, h, st.T, st.s, strict=True):
        ref = iapws.IAPWS97(P=pi / 1e6, T=Ti)  # an independent IF97 implementation
        # 1e-9 relative: the Newton stop test; both evaluate the same IF97 polynomials
        assert ref.h * 1e3 == pytest.approx(hi, rel=1e-9)
        # s from the same T: the formulation's own consistency, to round-off level
        assert ref.s * 1e3 == pytest.approx(si, rel=1e-9)


def test_ps_states_reproduce_s():
    # below the critical pressure (CoolProp's IF97 (p, s) refuses region 3)
    rng = np.random.default_rng(RNG_SEED + 2)
    p, h = _far_states(40, rng, supercritical=False)
    s = WATER.state_ph(p, h).s
    st = WATER.state_ps(p, s)
    state = CP.AbstractState("IF97", "Water")
    for i in range(p.size):
        state.update(CP.PT_INPUTS, p[i], st.T[i])
        assert state.smass() == pytest.approx(s[i], rel=1e-9)  # the Newton stop test
        # the two inverse solves meet at the same state: 1e-9 in T moves h by ~1e-9
        assert st.h[i] == pytest.approx(h[i], rel=1e-8)


def test_states_within_the_margin_stay_on_their_side():
    p = np.array([5e3, 1e5, 1e6, 5e6, 12e6])
    ts = if97_tsat(p)
    for side in (-1.0, 1.0):
        T = ts + side * 0.02  # within the 0.05 K margin
        h = _h_pT(p, T)
        st = WATER.state_ph(p, h)
        assert np.all(np.sign(st.T - ts) == side)
        # pT_quiet extrapolates from Tsat -/+ margin with cp; the neglected
        # (dcp/dT) dT^2 / 2 over at most the 0.05 K margin: dcp/dT reaches ~100
        # J/(kg K^2) on the vapour side at 12 MPa, ~0.1 J/kg, below 1e-7 of h here
        np.testing.assert_allclose(_h_pT(p, st.T), h, rtol=1e-7)


# --------------------------------------------------------------------------------------
# the lean path and the stacked call give the numbers of the full rules
# --------------------------------------------------------------------------------------
def _mixed_states(rng, supercritical=True):
    p, h = _far_states(30, rng, supercritical)
    q = np.array([7e3, 2e5, 4e6, 15e6])
    ts = if97_tsat(q)
    near = np.concatenate((_h_pT(q, ts - 0.01), _h_pT(q, ts + 0.03), _h_pT(q, ts - 0.2)))
    wet = [WATER.state_px(qi, 0.4).h for qi in q]
    p = np.concatenate((p, q, q, q, q, [1e6, np.nan]))
    h = np.concatenate((h, near, wet, [np.nan, 2.9e6]))
    return p, h


def test_stacked_call_gives_each_state_its_values():
    # liquid, steam, supercritical, within-margin, wet states and gaps in one call:
    # each state's values are CoolProp's at its own (p, T) or (p, x).  (T itself
    # depends on the call's company within the Newton stop test: every state is
    # stepped until all steps are below 1e-9 T, as before the stacking.)
    p, h = _mixed_states(np.random.default_rng(RNG_SEED + 3))
    n_far = p.size - 18
    st = WATER.state_ph(p, h)
    state = CP.AbstractState("IF97", "Water")
    for i in range(n_far):
        state.update(CP.PT_INPUTS, p[i], st.T[i])
        assert state.hmass() == pytest.approx(h[i], rel=1e-9)  # the Newton stop test
        # exact: the same IF97 functions at the same (p, T)
        assert (st.s[i], st.cp[i], st.rho[i]) == (state.smass(), state.cpmass(), state.rhomass())
    ts = if97_tsat(p[n_far : n_far + 12])
    side = np.sign(st.T[n_far : n_far + 12] - ts)
    np.testing.assert_array_equal(side, np.repeat([-1.0, 1.0, -1.0], 4))
    wet = slice(n_far + 12, n_far + 16)
    ref = WATER.state_px(p[wet], st.x[wet])  # exact: the same PQ updates
    for k in ("T", "s", "rho"):
        np.testing.assert_array_equal(getattr(st, k)[wet], getattr(ref, k), err_msg=k)
    np.testing.assert_allclose(st.x[wet], 0.4, rtol=1e-9)  # h = h' + 0.4 (h'' - h')
    for k in ("T", "s", "cp", "rho", "x", "dh_dT_p", "dh_dp_T"):  # (p and h as given)
        assert np.isnan(getattr(st, k)[-2:]).all(), k


def test_lean_path_equals_the_full_rules(monkeypatch):
    rng = np.random.default_rng(RNG_SEED + 4)
    p, h = _mixed_states(rng, supercritical=False)
    pf, hf = _far_states(200, rng)
    pc, hc = _far_states(200, rng, supercritical=False)
    sc = WATER.state_ph(pc, hc).s

    # states 0 to 0.3 K from the line, each in a call of its own: the lean path
    # takes those beyond the bracket of Tsat and the margin, the rules the others
    pb = np.exp(rng.uniform(np.log(2e3), np.log(2.1e7), 150))
    Tb = if97_tsat(pb) + rng.uniform(-0.3, 0.3, pb.size)
    hb = _h_pT(pb, Tb)

    def calls():
        out = [WATER.state_ph(pf, hf), WATER.state_ph(p, h), WATER.state_ps(pc, sc)]
        out += [WATER.state_ph(pf[i : i + 1], hf[i : i + 1]) for i in range(0, 200, 9)]
        out += [WATER.state_ph(pb[i : i + 1], hb[i : i + 1]) for i in range(pb.size)]
        return out

    lean = calls()
    monkeypatch.setattr(inverse, "_solve_far", lambda *args: None)
    for a, b in zip(lean, calls(), strict=True):
        _assert_same_state(a, b)  # bit for bit


def test_iterate_entering_the_margin_falls_back_to_the_full_rules(monkeypatch):
    # Margin 0.2 K: states whose backward T lies just beyond the bracket - margin
    # (the lean path starts) while the refined T lies just inside it (the lean path
    # must give up during the Newton steps and the full rules take over).
    wide = get_fluid("water", saturation_margin=0.2)
    q, lo, _ = inverse._tsat_bracket()
    rng = np.random.default_rng(RNG_SEED + 5)
    p = np.exp(rng.uniform(np.log(1e4), np.log(1.5e7), 4000))
    edge = lo[q.searchsorted(p, "right")] - 0.2
    h = _h_pT(p, edge + rng.uniform(0.0005, 0.02, p.size))
    state = CP.AbstractState("IF97", "Water")
    backward = []
    for pi, hi in zip(p, h, strict=True):
        state.update(CP.HmassP_INPUTS, hi, pi)
        backward.append(state.T())
    picked = np.array(backward) < edge - 1e-9
    assert picked.sum() >= 3  # IF97 Table 3: the backward T errs by up to 25 mK
    p, h, edge = p[picked], h[picked], edge[picked]
    gave_up = []
    lean_far = inverse._solve_far

    def spy(*args):
        out = lean_far(*args)
        gave_up.append(out is None)
        return out

    monkeypatch.setattr(inverse, "_solve_far", spy)
    lean = wide.state_ph(p, h)
    assert gave_up == [True]
    monkeypatch.setattr(inverse, "_solve_far", lambda *args: None)
    _assert_same_state(lean, wide.state_ph(p, h))
    # and the full rules see the refined states within the margin, liquid side
    assert np.all(lean.T > edge) and np.all(lean.T < if97_tsat(p))


def test_bracket_holds_coolprop_saturation_temperature():
    q, lo, hi = inverse._tsat_bracket()
    rng = np.random.default_rng(RNG_SEED + 6)
    p = np.exp(rng.uniform(np.log(P_TRIPLE), np.log(P_CRITICAL), 3000))
    k = q.searchsorted(p, "right")
    state = CP.AbstractState("IF97", "Water")
    ts = []
    for pi in p:
        state.update(CP.PQ_INPUTS, pi, 0.0)
        ts.append(state.T())
    ts = np.array(ts)
    assert np.all(lo[k] <= ts) and np.all(ts <= hi[k])
    # narrow enough to leave states a few tenths of a kelvin from the line lean
    # (16384 grid points: about 0.054 K wide at most, near the critical point)
    assert np.max(hi[k] - lo[k]) < 0.06
    # no bound below the triple point, none needed at and above the critical point
    k = q.searchsorted(np.array([100.0, P_CRITICAL, 5e7]), "right")
    assert (lo[k[0]], hi[k[0]]) == (-np.inf, np.inf)
    assert np.isnan(lo[k[1:]]).all() and np.isnan(hi[k[1:]]).all()


# --------------------------------------------------------------------------------------
# errors and gaps inside a stacked call
# --------------------------------------------------------------------------------------
def test_out_of_range_state_inside_a_stacked_call_names_the_stream():
    rng = np.random.default_rng(RNG_SEED + 7)
    p, h = _far_states(6, rng)
    h = h.copy()
    h[[2, 4]] = -5e5
    sids = [f"s{i}" for i in range(p.size)]
    with pytest.raises(PropertyRangeError, match=r"stream 's2': p = .* h = -500 kJ/kg") as err:
        plant_states.state_ph("water", p, h, sids)
    assert err.value.key == "streams.s2"
    with pytest.raises(PropertyRangeError, match=r"\(1 more state\(s\) in this call"):
        WATER.state_ph(p, h)


def test_gaps_give_nan_states_without_warnings():
    p = np.array([1e6, np.nan, 5e6, 2e5])
    h = np.array([3.0e6, 3.0e6, np.nan, 4e5])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        st = WATER.state_ph(p, h)
    for k in ("T", "s", "rho", "cp", "dh_dp_T"):
        value = getattr(st, k)
        assert np.isnan(value[1:3]).all() and np.isfinite(value[[0, 3]]).all(), k
