"""The initial guess's batched property calls give each stream what a call of its own
gives it, including the streams whose call fails.

Reference values: CoolProp's IAPWS-IF97 backend point by point (PropsSI), an outside
check of the batched calls.
"""

from __future__ import annotations

from types import SimpleNamespace

import CoolProp.CoolProp as CP
import pytest

from perftest.plant.guess import _sat_T, _sat_T_many, _T_ph_many


def _spec(fluids):
    return SimpleNamespace(streams={s: SimpleNamespace(fluid=f) for s, f in fluids.items()})


def test_saturation_temperatures_batched_with_a_supercritical_stream():
    spec = _spec({"a": "water", "b": "water", "c": "water", "d": "R134a"})
    p = {"a": 1e5, "b": 30e6, "c": 2e6, "d": 5e5}  # b above water's critical pressure
    out = _sat_T_many(spec, list(p), p)
    assert out == {s: _sat_T(spec.streams[s].fluid, p[s]) for s in p}
    assert out["b"] is None
    # IF97 saturation line (Eq. 31) through CoolProp: 1e-9 K is rounding
    assert out["a"] == pytest.approx(CP.PropsSI("T", "P", 1e5, "Q", 0, "IF97::Water"), abs=1e-9)
    # R134a through CoolProp's HEOS backend, the same call
    assert out["d"] == pytest.approx(CP.PropsSI("T", "P", 5e5, "Q", 0, "R134a"), rel=1e-12)


def test_temperatures_from_enthalpy_batched_with_a_failing_stream():
    spec = _spec({"a": "water", "b": "water", "c": "water"})
    p = {"a": 1e6, "b": 1e6, "c": 5e6}
    h = {"a": 3.0e6, "b": -5.0e7, "c": 4.0e5}  # b: far below any liquid state
    out = _T_ph_many(spec, list(p), p, h)
    assert "b" not in out
    for s in ("a", "c"):
        # IF97 forward/backward consistency: h(p, T) reproduces h to 1e-9 relative
        # (perftest refines the backward temperature), so T agrees with CoolProp's
        # PH flash to its backward-equation accuracy (IF97: 25 mK at most)
        ref = CP.PropsSI("T", "P", p[s], "H", h[s], "IF97::Water")
        assert out[s] == pytest.approx(ref, abs=0.025)
        back = CP.PropsSI("H", "P", p[s], "T", out[s], "IF97::Water")
        assert back == pytest.approx(h[s], rel=1e-9)
