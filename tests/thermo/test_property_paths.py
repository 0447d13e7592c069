"""The lean paths of the property layer give the values and the errors of the full ones.

(p, T) states far from the saturation line skip the saturation rules (a bracket of
Tsat(p) on a grid decides it) and reach CoolProp in two array calls per group; the
saturation line for the plant model reads only the values it needs.  The checks
here are outside ones: CoolProp's own point-by-point ``AbstractState.update``, the
IAPWS-IF97 saturation equation evaluated directly, and the messages of the full
path (which the lean path must repeat word for word).
"""

from __future__ import annotations

import warnings

import CoolProp.CoolProp as CP
import numpy as np
import pandas as pd
import pytest

from perftest.errors import PropertyRangeError
from perftest.plant import states as plant_states
from perftest.thermo import single_phase
from perftest.thermo.if97 import P_CRITICAL, P_TRIPLE, if97_tsat
from perftest.thermo.properties import get_fluid
from perftest.thermo.saturation import if97_screen

WATER = get_fluid("water")
MARGIN = WATER.saturation_margin
RNG_SEED = 20261205


def _point_by_point(p, T):
    """h, cp and the central-difference (dh/dp)_T from CoolProp point updates."""
    state = CP.AbstractState("IF97", "Water")
    h, cp, dhdp = [], [], []
    for pi, Ti in zip(p, T, strict=True):
        state.update(CP.PT_INPUTS, pi, Ti)
        h.append(state.hmass())
        cp.append(state.cpmass())
        dp = 1e-5 * pi  # the step of perftest.thermo.backend (_FD_REL_STEP)
        state.update(CP.PT_INPUTS, pi + dp, Ti)
        hp = state.hmass()
        state.update(CP.PT_INPUTS, pi - dp, Ti)
        hm = state.hmass()
        dhdp.append((hp - hm) / (2.0 * dp))
    return np.array(h), np.array(cp), np.array(dhdp)


def _liquid_and_steam(n, rng):
    """Compressed liquid and superheated steam at least 1 K from the saturation line."""
    p = rng.uniform(1e4, 2.2e7, n)
    ts = if97_tsat(p)
    T_liq = ts - rng.uniform(1.0, 60.0, n)
    T_vap = np.minimum(ts + rng.uniform(1.0, 400.0, n), 1073.0)
    return p, np.maximum(T_liq, 274.0), T_vap


# --------------------------------------------------------------------------------------
# values: the array path against CoolProp point by point
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("phase", ["liquid", "vapour", None])
def test_stacked_evaluation_equals_point_updates(phase):
    rng = np.random.default_rng(RNG_SEED)
    p, T_liq, T_vap = _liquid_and_steam(40, rng)
    T = T_liq if phase == "liquid" else T_vap
    if phase is None:  # a mix of both sides in one call
        T = np.where(np.arange(p.size) % 2 == 0, T_liq, T_vap)
    streams = [f"s{i}" for i in range(p.size)]
    h, dhdT, dhdp = plant_states.h_pT("water", phase, p, T, streams)
    ref_h, ref_cp, ref_dhdp = _point_by_point(p, T)
    # Exact: CoolProp's array call evaluates every point on its own with the same IF97
    # functions as the point update, and the stencil is the same arithmetic; the
    # model's results are meant to be the same floating-point numbers either way.
    np.testing.assert_array_equal(h, ref_h)
    np.testing.assert_array_equal(dhdT, ref_cp)
    np.testing.assert_array_equal(dhdp, ref_dhdp)
    # and the public method gives the same numbers
    for a, b in zip(WATER.h_pT(p, T, phase), (h, dhdT, dhdp), strict=True):
        np.testing.assert_array_equal(a, b)


def test_supercritical_states_on_the_array_path():
    p = np.array([23e6, 25e6, 30e6, 40e6])
    T = np.array([600.0, 650.0, 700.0, 900.0])
    h, cp, dhdp = plant_states.h_pT("water", "supercritical", p, T, ["a", "b", "c", "d"])
    ref = _point_by_point(p, T)
    for a, b in zip((h, cp, dhdp), ref, strict=True):
        np.testing.assert_array_equal(a, b)  # exact, as above


def test_saturation_equals_point_updates_and_clausius_clapeyron():
    p = np.array([5e3, 1e5, 1e6, 5e6, 15e6, 21e6])
    T, dTdp = plant_states.saturation("water", p, [f"s{i}" for i in range(p.size)])
    state = CP.AbstractState("IF97", "Water")
    for i, pi in enumerate(p):
        state.update(CP.PQ_INPUTS, pi, 0.0)
        Tf, hf, vf = state.T(), state.hmass(), 1.0 / state.rhomass()
        state.update(CP.PQ_INPUTS, pi, 1.0)
        hg, vg = state.hmass(), 1.0 / state.rhomass()
        assert T[i] == Tf  # exact: the same CoolProp update read the same way
        assert dTdp[i] == Tf * (vg - vf) / (hg - hf)  # Clausius-Clapeyron, same arithmetic
    # IAPWS R7-97(2012) Eq. 31 directly: CoolProp's region-4 equation agrees to
    # round-off (~1e-13 K on ~500 K), 1e-9 K leaves room for operation order
    np.testing.assert_allclose(T, if97_tsat(p), rtol=0, atol=1e-9)


def test_wet_enthalpy_from_saturated_values():
    p = np.array([1e4, 2e5, 3e6])
    x = np.array([0.9, 0.5, 0.0])
    h, dhdp, dhdx = plant_states.h_px("water", p, x, ["a", "b", "c"])
    liq, vap = WATER.state_px(p, 0.0), WATER.state_px(p, 1.0)
    # h = h' + x (h'' - h'), the definition of the quality; same arithmetic, exact
    np.testing.assert_array_equal(h, liq.h + x * (vap.h - liq.h))
    np.testing.assert_array_equal(dhdx, vap.h - liq.h)
    # one-sided difference of relative step 1e-6 against a central one of 1e-4:
    # both approximate d(h_f + x h_fg)/dp to ~1e-5 relative here
    dp = 1e-4 * p
    ref = (WATER.state_px(p + dp, x).h - WATER.state_px(p - dp, x).h) / (2 * dp)
    np.testing.assert_allclose(dhdp, ref, rtol=1e-4)


# --------------------------------------------------------------------------------------
# the saturation bracket
# --------------------------------------------------------------------------------------
def test_screen_brackets_the_saturation_temperature():
    grid, lo, hi = if97_screen(MARGIN)
    # IAPWS R7-97(2012) Eq. 31 rises with p: the grid's temperatures must too
    assert np.all(np.diff(if97_tsat(grid[1:])) > 0)
    rng = np.random.default_rng(RNG_SEED)
    p = np.concatenate(
        (np.exp(rng.uniform(np.log(P_TRIPLE), np.log(P_CRITICAL), 200_000)), grid[1:-1])
    )
    k = grid.searchsorted(p, "right")
    ts = if97_tsat(p)
    # every state below lo is more than the margin below Tsat, above hi more than it above
    assert np.all(lo[k] < ts - MARGIN)
    assert np.all(hi[k] > ts + MARGIN)
    # and the bracket is narrow, so that states a few tenths of a kelvin from the line
    # still take the array path (16384 grid points: about 0.054 K wide at most, near
    # the critical point where Tsat rises fastest in log p)
    assert np.max((hi[k] - MARGIN) - (lo[k] + MARGIN)) < 0.06


@pytest.mark.parametrize(
    ("p", "expect"),
    [
        (-1.0, "nan"),
        (0.0, "nan"),
        (100.0, "off"),
        (P_CRITICAL, "off"),
        (5e7, "off"),
        (np.nan, "off"),
    ],
)
def test_screen_off_the_saturation_line(p, expect):
    grid, lo, hi = if97_screen(MARGIN)
    k = grid.searchsorted(np.array([p]), "right")
    if expect == "nan":  # p <= 0 passes neither test: the full rules raise
        assert np.isnan(lo[k]).all() and np.isnan(hi[k]).all()
    else:  # no saturation line there: any temperature passes
        assert lo[k][0] == np.inf and hi[k][0] == -np.inf


def test_states_near_the_line_take_the_full_rules(monkeypatch):
    calls = []
    full = single_phase.pT_rules

    def spy(*args, **kwargs):
        calls.append(args[2].copy())
        return full(*args, **kwargs)

    monkeypatch.setattr(single_phase, "pT_rules", spy)
    p = np.array([1e6, 1e6])
    ts = float(if97_tsat(p[:1])[0])
    WATER.h_pT(p, np.array([ts - 5.0, ts - 2.0]), "liquid")
    assert calls == []  # far from the line: array path
    h, _, _ = WATER.h_pT(p, np.array([ts - 5.0, ts - 0.03]), "liquid")
    assert len(calls) == 1  # within the margin: anchored by the full rules
    # the anchored state: evaluated at Tsat - margin and extrapolated with cp
    state = CP.AbstractState("IF97", "Water")
    state.update(CP.PT_INPUTS, 1e6, ts - MARGIN)
    # cp (T - Ta) over 0.02 K: exact arithmetic apart from the rounding of T - Ta
    assert h[1] == pytest.approx(
        state.hmass() + state.cpmass() * (ts - 0.03 - (ts - MARGIN)), rel=1e-15, abs=1e-9
    )


def test_changed_margin_rebuilds_the_bracket():
    wide = get_fluid("water", saturation_margin=0.5)
    ts = float(if97_tsat(np.array([1e6]))[0])
    # 0.3 K below saturation: clear for 0.05 K, within the margin for 0.5 K
    WATER.h_pT(1e6, ts - 0.3, "liquid")
    h_wide = wide.h_pT(1e6, ts - 0.3, "liquid")[0]
    state = CP.AbstractState("IF97", "Water")
    state.update(CP.PT_INPUTS, 1e6, ts - 0.5)
    # anchored at Tsat - 0.5 K and carried 0.2 K with cp: rounding only
    assert h_wide == pytest.approx(state.hmass() + state.cpmass() * 0.2, rel=1e-12)
    with pytest.raises(PropertyRangeError, match="within 0.5 K of saturation"):
        wide.h_pT(1e6, ts - 0.3)


# --------------------------------------------------------------------------------------
# errors inside a stacked call: the same messages as before, naming the stream
# --------------------------------------------------------------------------------------
def _streams(n):
    return [f"line_{i}" for i in range(n)]


def test_out_of_range_state_inside_a_stacked_call_names_the_stream():
    rng = np.random.default_rng(RNG_SEED)
    p, _, T = _liquid_and_steam(12, rng)
    T[7] = 2500.0  # beyond IF97 region 5 (2273.15 K)
    with pytest.raises(PropertyRangeError) as info:
        plant_states.h_pT("water", "vapour", p, T, _streams(12))
    msg = str(info.value)
    assert msg.startswith("stream 'line_7': p = ")
    assert "is outside the range of IAPWS-IF97 for water" in msg
    assert "Check the stream's measured values" in msg
    assert info.value.key == "streams.line_7"


@pytest.mark.parametrize(
    ("phase", "shift", "text"),
    [
        ("liquid", +3.0, "is declared liquid but lies 3.00 K above saturation"),
        ("vapour", -3.0, "is declared vapour but lies 3.00 K below saturation"),
        (None, 0.01, "is within 0.05 K of saturation"),
    ],
)
def test_wrong_side_inside_a_stacked_call_names_the_stream(phase, shift, text):
    rng = np.random.default_rng(RNG_SEED)
    p, T_liq, T_vap = _liquid_and_steam(9, rng)
    T = T_vap.copy() if phase == "vapour" else T_liq.copy()
    T[4] = if97_tsat(p[4:5])[0] + shift
    with pytest.raises(PropertyRangeError, match=text) as info:
        plant_states.h_pT("water", phase, p, T, _streams(9))
    assert str(info.value).startswith("stream 'line_4': ")
    assert info.value.key == "streams.line_4"


def test_negative_temperature_inside_a_stacked_call():
    p = np.array([1e6, 2e6, 3e6])
    T = np.array([400.0, -5.0, 420.0])
    with pytest.raises(PropertyRangeError, match="must be positive and absolute") as info:
        plant_states.h_pT("water", "liquid", p, T, _streams(3))
    assert info.value.key == "streams.line_1"


def test_saturation_above_the_critical_pressure_names_the_stream():
    p = np.array([1e5, 3e6, 25e6])
    with pytest.raises(PropertyRangeError, match="not a saturated or wet state") as info:
        plant_states.saturation("water", p, _streams(3))
    assert str(info.value).startswith("stream 'line_2': p = 25 MPa, x = 0")
    with pytest.raises(PropertyRangeError) as info:
        plant_states.h_px("water", p, np.array([0.5, 0.5, 0.5]), _streams(3))
    assert info.value.key == "streams.line_2"


def test_gaps_and_infinite_pressures_raise_no_numpy_warning():
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # any RuntimeWarning from numpy fails the test
        h, _, _ = WATER.h_pT(np.array([np.nan, 1e6]), np.array([400.0, 400.0]), "liquid")
        assert np.isnan(h[0]) and np.isfinite(h[1])
        with pytest.raises(PropertyRangeError, match="outside the range"):
            WATER.h_pT(np.array([np.inf, 1e6]), np.array([400.0, 400.0]), "liquid")
        T, _ = plant_states.saturation("water", np.array([np.nan, 1e6]), ["a", "b"])
        assert np.isnan(T[0]) and np.isfinite(T[1])


# --------------------------------------------------------------------------------------
# argument shapes: the quick route for float arrays keeps the shapes and kinds
# --------------------------------------------------------------------------------------
def test_shapes_and_kinds_are_kept():
    p = np.array([[1e6, 2e6], [3e6, 4e6]])
    T = np.full((2, 2), 400.0)
    h = WATER.enthalpy_pT(p, T)
    assert h.shape == (2, 2)
    np.testing.assert_array_equal(h.ravel(), WATER.enthalpy_pT(p.ravel(), T.ravel()))
    assert isinstance(WATER.enthalpy_pT(np.float64(1e6), np.float64(400.0)), float)
    assert isinstance(WATER.enthalpy_pT(np.array(1e6), np.array(400.0)), float)
    s = pd.Series([1e6, 2e6], index=["a", "b"])
    out = WATER.enthalpy_pT(s, np.array([400.0, 410.0]))
    assert isinstance(out, pd.Series) and list(out.index) == ["a", "b"]
    # a non-contiguous view is read correctly
    wide = np.array([[1e6, 0.0], [2e6, 0.0]])
    np.testing.assert_array_equal(
        WATER.enthalpy_pT(wide[:, 0], np.array([400.0, 410.0])),
        WATER.enthalpy_pT(np.array([1e6, 2e6]), np.array([400.0, 410.0])),
    )


def test_gas_fuel_atoms_remembered_are_those_of_a_fresh_parse():
    """The heat-loss method parses a gas fuel once per call; the remembered atoms equal
    a fresh parse, an invalid mapping still raises every time, and equal-looking
    inputs of another type are parsed on their own."""
    from perftest.errors import InputError
    from perftest.thermo import fuel_analysis as fa
    from perftest.thermo.fuel import Gas

    fuel = {"methane": 0.9, "ethane": 0.06, "nitrogen": 0.04}
    a = fa.fuel_atoms(fuel, "t")
    assert fa.fuel_atoms(dict(fuel), "t") is a  # the same content: the kept record
    assert a == fa._from_gas(Gas(fuel).composition)
    for _ in range(2):
        with pytest.raises(InputError):
            fa.fuel_atoms({"methane": 0.9, "unobtainium": 0.1}, "t")
    assert fa.fuel_atoms({"methane": 1}, "t") == fa.fuel_atoms({"methane": 1.0}, "t")
    assert fa._gas_atoms({"methane": 1}) is not fa._gas_atoms({"methane": 1.0})


# --------------------------------------------------------------------------------------
# one call for the states of several groups (plant.states.h_pT_sides)
# --------------------------------------------------------------------------------------
def test_one_call_for_mixed_sides_equals_point_updates():
    rng = np.random.default_rng(RNG_SEED + 1)
    p, T_liq, T_vap = _liquid_and_steam(30, rng)
    side = np.arange(p.size) % 3  # liquid, vapour, undeclared in turn
    T = np.where(side == 1, T_vap, T_liq)
    below = side != 1
    above = side != 0
    h, cp, dhdp = plant_states.h_pT_sides("water", p, T, below, above)
    ref = _point_by_point(p, T)
    for a, b in zip((h, cp, dhdp), ref, strict=True):
        np.testing.assert_array_equal(a, b)  # exact, as above


@pytest.mark.parametrize(
    ("shift", "below", "above"),
    [
        (0.03, False, True),  # vapour inside the margin: anchored by the rules
        (-0.03, True, True),  # undeclared inside the margin: the rules raise
        (-2.0, False, True),  # vapour below the line: the rules raise
        (2.0, True, False),  # liquid above the line: the rules raise
    ],
)
@pytest.mark.parametrize("fluid", ["water", "R134a"])
def test_one_call_declines_where_a_rule_applies(fluid, shift, below, above):
    f = get_fluid(fluid)
    p = np.array([2e5, 5e5, 1e6])
    ts = f.saturation_T(p)
    T = ts + np.array([5.0, shift, -5.0 if below and not above else 5.0])
    if below and not above:
        T[0] = ts[0] - 5.0
    n = p.size
    assert plant_states.h_pT_sides(fluid, p, T, np.full(n, below), np.full(n, above)) is None


@pytest.mark.parametrize("fluid", ["R134a", "nitrogen", "water:IAPWS95"])
def test_one_call_of_other_backends_equals_the_full_rules(fluid):
    f = get_fluid(fluid)
    rng = np.random.default_rng(RNG_SEED + 2)
    p = rng.uniform(0.1, 0.8, 12) * f.p_critical
    ts = f.saturation_T(p)
    liquid = np.arange(p.size) % 2 == 0
    T = np.where(liquid, ts - rng.uniform(1.0, 20.0, p.size), ts + rng.uniform(1.0, 80.0, p.size))
    got = single_phase.backend_h_cp_dhdp(f, p, T, liquid, ~liquid)
    assert got is not None
    for phase, where in (("liquid", liquid), ("vapour", ~liquid)):
        ref = single_phase.pT_rules(f, p[where], T[where], phase, ["h", "cp", "dhdp"], None)
        # the same CoolProp updates and getters: exact
        for a, key in zip(got, ("h", "cp", "dhdp"), strict=True):
            np.testing.assert_array_equal(a[where], ref[key])
    # above the critical pressure there is no saturation rule: plain states
    p2 = np.array([1.2, 2.0]) * f.p_critical
    T2 = np.array([1.1, 1.5]) * f.T_critical
    got = single_phase.backend_h_cp_dhdp(f, p2, T2, np.ones(2, bool), np.ones(2, bool))
    ref = single_phase.pT_rules(f, p2, T2, None, ["h", "cp", "dhdp"], None)
    np.testing.assert_array_equal(got[0], ref["h"])
    # non-positive or non-finite inputs are left to the rules
    for bad in (np.array([-1.0, 1e5]), np.array([np.nan, 1e5]), np.array([np.inf, 1e5])):
        assert (
            single_phase.backend_h_cp_dhdp(f, bad, T2, np.ones(2, bool), np.ones(2, bool)) is None
        )


def test_repeated_pressures_share_their_saturated_values():
    """Streams at one pressure get one CoolProp update; values as one update each."""
    p = np.array([7961.5, 7988.0, 7961.5, np.nan, 7961.5, 2e6, np.nan, 7988.0])
    T, dTdp = plant_states.saturation("water", p, [f"s{i}" for i in range(p.size)])
    state = CP.AbstractState("IF97", "Water")
    for i, pi in enumerate(p):
        if np.isnan(pi):
            assert np.isnan(T[i]) and np.isnan(dTdp[i])  # a gap stays a gap
            continue
        state.update(CP.PQ_INPUTS, pi, 0.0)
        Tf, hf, vf = state.T(), state.hmass(), 1.0 / state.rhomass()
        state.update(CP.PQ_INPUTS, pi, 1.0)
        hg, vg = state.hmass(), 1.0 / state.rhomass()
        assert T[i] == Tf and dTdp[i] == Tf * (vg - vf) / (hg - hf)  # exact, as above
    # a pressure out of the line among repeated ones still names its stream
    with pytest.raises(PropertyRangeError, match="s2"):
        plant_states.saturation("water", np.array([1e5, 1e5, 3e7, 1e5]), ["s0", "s1", "s2", "s3"])
