"""Declared stream phases against the measured pressure and temperature.

Outside checks used here:

* saturation temperatures of water from CoolProp's IAPWS-IF97 backend
  (``PropsSI("T", "P", p, "Q", 0, "IF97::Water")``, IF97 region 4, Eq. 31);
* the critical point of water, 22.064 MPa and 647.096 K (IAPWS-IF97, Eqs. 1-2);
* the demo steam unit's main steam is superheated by about 200 K (sample_data/brackenfold:
  its truth.json, made by an independent heat balance): declared "wet", it must be
  refused, and as declared ("vapour") it must still reconcile.
"""

from __future__ import annotations

import re
import warnings

import CoolProp.CoolProp as CP
import pytest

import perftest
from perftest.demo import data_dir, demo_measurements
from perftest.errors import PlantFileError, PropertyRangeError
from perftest.plant.equations import build_model
from perftest.plant.phases import check_declared_phases

IF97 = "IF97::Water"
P = 1.0e6  # Pa, a mid-range pressure well inside the saturation line
TSAT = CP.PropsSI("T", "P", P, "Q", 0, IF97)  # 453.03 K (179.88 degC)


def _plant_with_phase(tmp_path, stream: str, phase: str):
    """The demo plant with one stream's declared phase replaced."""
    text = (data_dir() / "plant.toml").read_text(encoding="utf-8")
    pattern = rf'(\[streams\.{stream}\]\nfluid = "water"\nphase = )"\w+"'
    new, n = re.subn(pattern, rf'\1"{phase}"', text)
    assert n == 1, "the demo plant's stream table changed; update this test"
    path = tmp_path / "plant.toml"
    path.write_text(new, encoding="utf-8")
    return perftest.load_plant(path)


def test_demo_main_steam_declared_wet_is_refused(tmp_path):
    _, m = demo_measurements()
    plant = _plant_with_phase(tmp_path, "main_steam", "wet")
    p, T = m["PT-101"].value, m["TT-101"].value
    tsat = CP.PropsSI("T", "P", p, "Q", 0, IF97)
    assert T - tsat > 100  # K: the demo's main steam is far into superheat
    with pytest.raises(PlantFileError) as info:
        perftest.reconcile(plant, m)
    text = str(info.value)
    assert "'main_steam'" in text and "'wet'" in text
    assert "PT-101" in text and "TT-101" in text
    assert f"{p / 1e6:.6g} MPa" in text and f"{T:.2f} K" in text
    # the saturation temperature in the message is IF97's to its printed 0.01 K
    assert f"saturation temperature {tsat:.2f} K" in text
    assert info.value.key == "streams.main_steam.phase" and info.value.line is not None
    # also a PropertyRangeError: code that caught the wrong side of saturation still does
    assert isinstance(info.value, PropertyRangeError)


def test_demo_as_declared_still_reconciles():
    plant, m = demo_measurements()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rec = perftest.reconcile(plant, m)
    assert rec.result.converged
    assert "TT-101" not in [s.tag for s in rec.eliminated]


@pytest.mark.parametrize("scenario", ["ostrenby", "wrenhollow"])
def test_other_scenarios_pass_the_phase_check(scenario):
    # chiller: R134a suction/discharge vapour, liquid line, wet evaporator inlet;
    # CHP: superheated steam, a saturated deaerator outlet, liquids
    plant, m = demo_measurements(scenario)
    spec = build_model(plant).spec
    check_declared_phases(plant, spec, {t: (m[t].value, m[t].u) for t in m.tags})


# (phase, p [Pa], u_p [Pa], T - Tsat(p) [K] or an absolute T [K] as ("abs", T), u_T [K],
#  expected error fragment or None).  At 1 MPa dTsat/dp is about 14.4 K/MPa
#  (Clausius-Clapeyron on IF97 values), so u_p = 0.1 MPa adds about 1.4 K to u.
CASES = [
    ("liquid", P, 1e3, +5.0, 0.5, "K above the saturation temperature"),
    ("liquid", P, 1e3, +1.0, 0.5, None),  # 2 u above: a saturated drain, accepted
    ("liquid", P, 1e3, -30.0, 0.5, None),  # subcooled: as declared
    ("liquid", P, 1e5, +2.0, 0.1, None),  # u_p makes 3 u about 4.3 K
    ("liquid", P, 1e3, +2.0, 0.1, "K above the saturation temperature"),
    ("vapour", P, 1e3, -5.0, 0.5, "K below the saturation temperature"),
    ("vapour", P, 1e3, -1.0, 0.5, None),
    ("vapour", P, 1e3, +150.0, 0.5, None),
    ("gas", P, 1e3, -5.0, 0.5, "K below the saturation temperature"),
    ("wet", P, 1e3, +5.0, 0.5, "K above the saturation temperature"),
    ("wet", P, 1e3, -5.0, 0.5, "K below the saturation temperature"),
    ("wet", P, 1e3, +0.3, 0.5, None),
    ("wet", 25e6, 1e4, ("abs", 700.0), 0.5, "above the critical pressure 22.064 MPa"),
    ("supercritical", P, 1e3, +100.0, 0.5, "below both the critical pressure"),
    ("supercritical", 25e6, 1e4, ("abs", 600.0), 0.5, None),
    ("vapour", 25e6, 1e4, ("abs", 600.0), 0.5, None),  # no saturation line above pc
]


@pytest.mark.parametrize("phase, p, u_p, dT, u_T, error", CASES)
def test_declared_phase_truth_table(tmp_path, phase, p, u_p, dT, u_T, error):
    plant = _plant_with_phase(tmp_path, "main_steam", phase)
    spec = build_model(plant).spec
    T = dT[1] if isinstance(dT, tuple) else CP.PropsSI("T", "P", p, "Q", 0, IF97) + dT
    measured = {"PT-101": (p, u_p), "TT-101": (T, u_T)}
    if error is None:
        check_declared_phases(plant, spec, measured)
    else:
        with pytest.raises(PlantFileError, match=re.escape(error)) as info:
            check_declared_phases(plant, spec, measured)
        assert f"declared {phase!r}" in str(info.value)


def test_unmeasured_temperature_is_not_checked(tmp_path):
    plant = _plant_with_phase(tmp_path, "main_steam", "liquid")
    spec = build_model(plant).spec
    # TT-101 missing (failed instrument): nothing to compare, nothing refused
    check_declared_phases(plant, spec, {"PT-101": (P, 1e3)})
    check_declared_phases(plant, spec, {"PT-101": (P, 1e3), "TT-101": (float("nan"), 0.5)})
