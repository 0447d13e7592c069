"""Truth table of bad property calls: states outside the equation of state, on the
wrong side of saturation, NaN or infinite inputs, wrong types and shapes.

A property call that cannot give a state must raise (a ``PropertyRangeError`` for a
state outside the range or on the wrong side of saturation, an ``InputError`` for a
malformed argument), never return NaN: a NaN enthalpy would travel silently into
the balances and the reported efficiency.

Range limits used below are those of IAPWS-IF97 (IAPWS R7-97(2012), section 1:
273.15 K <= T <= 1073.15 K for p <= 100 MPa; critical point 647.096 K,
22.064 MPa) and the triple point of water, 273.16 K (IAPWS R7-97, from memory).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from perftest.errors import InputError, PerftestError, PropertyRangeError
from perftest.thermo.properties import get_fluid, humid_air_state

WATER = get_fluid("water")

NAN = float("nan")
INF = float("inf")

# (call, error class, fragment)
BAD_CALLS = [
    # --- infinities are refused
    pytest.param(lambda: WATER.state_pT(INF, 400.0), PerftestError, r"p", id="pT-p-inf"),
    pytest.param(lambda: WATER.state_pT(1e6, INF), PerftestError, r"T", id="pT-T-inf"),
    # --- outside the range of the equation of state (IAPWS-IF97 limits, see above)
    pytest.param(
        lambda: WATER.state_pT(150e6, 400.0),
        PropertyRangeError,
        r"p = 150 MPa.*outside the range",
        id="pT-above-100MPa",
    ),
    pytest.param(
        lambda: WATER.state_pT(1e6, 250.0), PropertyRangeError, r"outside", id="pT-below-0C"
    ),
    pytest.param(
        lambda: WATER.state_pT(1e6, 3000.0), PropertyRangeError, r"outside", id="pT-3000K"
    ),
    pytest.param(
        lambda: WATER.state_pT(-1e5, 300.0),
        PropertyRangeError,
        r"must be positive and absolute",
        id="pT-negative-p",
    ),
    pytest.param(
        lambda: WATER.state_pT(0.0, 300.0),
        PropertyRangeError,
        r"must be positive and absolute",
        id="pT-zero-p",
    ),
    pytest.param(
        lambda: WATER.state_ph(1e6, -500e3),
        PropertyRangeError,
        r"h = -500 kJ/kg",
        id="ph-negative-h",
    ),
    pytest.param(lambda: WATER.state_ph(1e6, 50e6), PropertyRangeError, r"h = ", id="ph-huge-h"),
    # --- saturation: wrong side, no saturation above the critical point
    pytest.param(
        lambda: WATER.state_pT(1e6, 500.0, "liquid"),
        PropertyRangeError,
        r"declared liquid but lies .* above saturation",
        id="liquid-above-saturation",
    ),
    pytest.param(
        lambda: WATER.state_pT(1e6, 400.0, "vapour"),
        PropertyRangeError,
        r"declared vapour but lies .* below saturation",
        id="vapour-below-saturation",
    ),
    pytest.param(
        lambda: WATER.state_pT(1e6, 400.0, "wet"),
        PropertyRangeError,
        r"not fixed by pressure and temperature",
        id="wet-from-pT",
    ),
    pytest.param(
        lambda: WATER.state_pT(1e6, 400.0, "steam"),
        InputError,
        r"phase must be one of",
        id="unknown-phase",
    ),
    pytest.param(
        lambda: WATER.saturation_T(30e6),
        PropertyRangeError,
        r"no saturation temperature",
        id="Tsat-above-critical",
    ),
    pytest.param(
        lambda: WATER.saturation_p(700.0),
        PropertyRangeError,
        r"no saturation pressure",
        id="psat-above-critical",
    ),
    pytest.param(
        lambda: WATER.saturation_p(200.0),
        PropertyRangeError,
        r"no saturation pressure",
        id="psat-below-triple-point",
    ),
    pytest.param(
        lambda: WATER.state_px(1e5, 1.5), InputError, r"between 0 and 1", id="quality-above-1"
    ),
    pytest.param(
        lambda: WATER.state_px(1e5, -0.1), InputError, r"between 0 and 1", id="quality-negative"
    ),
    pytest.param(
        lambda: WATER.state_px(30e6, 0.5),
        PropertyRangeError,
        r"saturation",
        id="quality-above-critical-p",
    ),
    pytest.param(
        lambda: WATER.state_Tx(700.0, 0.5),
        PropertyRangeError,
        r"saturation",
        id="quality-above-critical-T",
    ),
    # --- wrong types and shapes
    pytest.param(lambda: WATER.state_pT("10 bar", 400.0), InputError, r"p", id="p-text"),
    pytest.param(lambda: WATER.state_pT(None, 400.0), InputError, r"p", id="p-none"),
    pytest.param(
        lambda: WATER.state_pT(np.array([1e6, 2e6]), np.array([400.0, 410.0, 420.0])),
        InputError,
        r"shape|broadcast|same",
        id="shapes-differ",
    ),
    # --- fluids
    pytest.param(lambda: get_fluid("lava"), PerftestError, r"Unknown fluid 'lava'", id="fluid"),
    pytest.param(lambda: get_fluid(""), PerftestError, r"fluid", id="fluid-empty"),
    pytest.param(lambda: get_fluid(None), PerftestError, r"fluid", id="fluid-none"),
    pytest.param(
        lambda: get_fluid("R134"), PerftestError, r"Unknown fluid 'R134'.*R134a", id="close-match"
    ),
    pytest.param(
        lambda: WATER.dead_state(-10.0, 101325.0),
        PerftestError,
        r"dead state",
        id="dead-state-negative-T",
    ),
    # --- humid air
    pytest.param(
        lambda: humid_air_state(293.15, 101325.0, relative_humidity=50.0),
        InputError,
        r"not percent",
        id="rh-in-percent",
    ),
    pytest.param(
        lambda: humid_air_state(293.15, 101325.0),
        InputError,
        r"exactly one of",
        id="no-moisture-input",
    ),
    pytest.param(
        lambda: humid_air_state(293.15, 101325.0, relative_humidity=0.5, dew_point=280.0),
        InputError,
        r"exactly one of",
        id="two-moisture-inputs",
    ),
    pytest.param(
        lambda: humid_air_state(293.15, 101325.0, dew_point=300.0),
        PropertyRangeError,
        r"humid air at T = 293.15 K",
        id="dew-point-above-dry-bulb",
    ),
]


@pytest.mark.parametrize("call, error, fragment", BAD_CALLS)
def test_bad_property_call(call, error, fragment):
    with pytest.raises(error, match=fragment):
        call()


# NaN is the property layer's mark of a gap in a logged signal (perftest.thermo.properties
# module notes: "NaN inputs give NaN outputs"): it must come out as NaN at that
# element only, never as a made-up finite number and never spread to the other
# elements.  The layers above refuse NaN before it reaches a result (see
# test_bad_input_reconciliation.py and test_numerical.py).
NAN_CALLS = [
    pytest.param(lambda: WATER.state_pT(np.array([1e6, NAN]), 400.0).h, id="pT-p"),
    pytest.param(lambda: WATER.state_pT(1e6, np.array([400.0, NAN])).h, id="pT-T"),
    pytest.param(lambda: WATER.state_ph(1e6, np.array([500e3, NAN])).T, id="ph-h"),
    pytest.param(lambda: WATER.state_px(np.array([1e5, NAN]), 0.5).h, id="px-p"),
    pytest.param(lambda: WATER.h_pT(1e6, np.array([400.0, NAN]))[0], id="h_pT"),
    pytest.param(lambda: WATER.state_ps(1e6, np.array([1.5e3, NAN])).T, id="ps-s"),
    pytest.param(lambda: WATER.saturation_T(np.array([1e5, NAN])), id="Tsat"),
]


@pytest.mark.parametrize("call", NAN_CALLS)
def test_nan_marks_only_its_own_element(call):
    out = np.asarray(call(), dtype=float)
    assert math.isfinite(out[0])
    assert math.isnan(out[1])


# Near saturation: states just inside the declared phase must give finite properties
# (the property layer anchors states within its saturation margin, see
# properties.Fluid); none may come back as NaN.
NEAR_SATURATION = [
    pytest.param(1e5, -0.02, "liquid", id="0.1MPa-liquid-20mK-below"),
    pytest.param(1e5, +0.02, "vapour", id="0.1MPa-vapour-20mK-above"),
    pytest.param(10e6, -0.01, "liquid", id="10MPa-liquid-10mK-below"),
    pytest.param(10e6, +0.01, "vapour", id="10MPa-vapour-10mK-above"),
    pytest.param(22.0e6, -0.05, "liquid", id="near-critical-liquid"),
    pytest.param(22.0e6, +0.05, "vapour", id="near-critical-vapour"),
    pytest.param(700.0, -0.01, "liquid", id="near-triple-liquid"),
]


@pytest.mark.parametrize("p, dT, phase", NEAR_SATURATION)
def test_states_near_saturation_are_finite(p, dT, phase):
    ts = float(WATER.saturation_T(p))
    st = WATER.state_pT(p, ts + dT, phase)
    for name in ("h", "s", "rho"):
        v = float(np.asarray(getattr(st, name)))
        assert math.isfinite(v), f"{name} is {v} at p = {p} Pa, T = Tsat {dT:+} K ({phase})"
    # the two sides of saturation differ by the latent heat: a liquid state must sit
    # below the saturated-vapour enthalpy and a vapour state above the saturated-liquid
    # one (any steam table; the gap is > 0 below the critical point)
    hf = float(np.asarray(WATER.state_px(p, 0.0).h))
    hg = float(np.asarray(WATER.state_px(p, 1.0).h))
    h = float(np.asarray(st.h))
    if phase == "liquid":
        assert h < hg
    else:
        assert h > hf
