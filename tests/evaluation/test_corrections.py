"""Tests of perftest.evaluation.corrections: curves, corrections and guarantee verdicts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from standin import StandIn

from perftest.errors import InputError, PlantFileError
from perftest.evaluation.corrections import (
    RULES,
    CorrectionCurve,
    CorrectionSurface,
    Guarantee,
    apply_corrections,
    correction_sensitivities,
    curve_from_table,
    curves_from_plant,
    guarantee_from_table,
    guarantees_from_plant,
)

# Power vs ambient temperature, normalised to 1 at 15 degC (illustrative numbers).
T_X = (273.15, 288.15, 303.15)
T_Y = (1.04, 1.0, 0.94)


@pytest.fixture
def power_curve():
    return CorrectionCurve("T_amb", T_X, T_Y, reference=288.15, result="net_power")


# --------------------------------------------------------------------------- curves


def test_interpolation_matches_hand_arithmetic(power_curve):
    # Break points are returned exactly.
    for x, y in zip(T_X, T_Y, strict=True):
        assert power_curve(x) == pytest.approx(y, rel=1e-15)
    # 20 degC: a third of the way from 15 to 30 degC: 1 + (0.94 - 1)/3 = 0.98.
    assert power_curve(293.15) == pytest.approx(0.98, rel=1e-13)
    # 5 degC: 5 K of the 15 K from 0 to 15 degC: 1.04 + (1.0 - 1.04) * 5/15 = 1.026667.
    assert power_curve(278.15) == pytest.approx(1.04 - 0.04 * 5 / 15, rel=1e-13)


def test_interpolation_vectorised_and_series(power_curve):
    s = pd.Series([280.0, 290.0, np.nan], index=list("abc"))
    out = power_curve(s)
    assert isinstance(out, pd.Series) and list(out.index) == list("abc")
    assert np.isnan(out["c"])
    np.testing.assert_allclose(out.iloc[:2], np.interp([280.0, 290.0], T_X, T_Y), rtol=1e-15)


@pytest.mark.parametrize("x", [273.0, 303.2, 400.0])
def test_no_extrapolation(power_curve, x):
    with pytest.raises(InputError, match=r"'net_power vs T_amb'.*T_amb = .*outside .*range"):
        power_curve(x)


def test_derivative_against_finite_differences(power_curve):
    h = 1e-4  # K: far inside a 15 K segment, so the difference quotient is exact
    for x in (275.0, 295.0, 300.0):
        fd = (power_curve(x + h) - power_curve(x - h)) / (2 * h)
        assert power_curve.derivative(x) == pytest.approx(fd, rel=1e-7)  # round-off of /2h
    # At the interior break point: mean of the adjacent slopes (documented rule).
    left, right = (1.0 - 1.04) / 15.0, (0.94 - 1.0) / 15.0
    assert power_curve.derivative(288.15) == pytest.approx(0.5 * (left + right), rel=1e-12)
    # End points: one-sided slopes.
    assert power_curve.derivative(273.15) == pytest.approx(left, rel=1e-12)
    assert power_curve.derivative(303.15) == pytest.approx(right, rel=1e-12)


def test_polynomial_curve():
    c = CorrectionCurve(
        "p_amb",
        polynomial=(1.0, -2e-6, 1e-11),
        reference=101325.0,
        valid_range=(90e3, 105e3),
        result="net_power",
    )
    dx = 95e3 - 101325.0
    assert c(95e3) == pytest.approx(1.0 - 2e-6 * dx + 1e-11 * dx**2, rel=1e-14)
    assert c.derivative(95e3) == pytest.approx(-2e-6 + 2e-11 * dx, rel=1e-12)
    with pytest.raises(InputError, match="outside the curve's range"):
        c(80e3)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"x": T_X, "y": (1.04, 1.01, 0.94), "reference": 288.15}, "must equal 1 at the ref"),
        (
            {"x": T_X, "y": (0.1, 0.0, -0.1), "reference": 290.0, "kind": "additive"},
            "must equal 0 at the reference",
        ),
        ({"x": T_X, "y": T_Y, "reference": 310.0}, "'reference' 310 lies outside"),
        ({"x": (273.15, 273.15, 303.15), "y": T_Y, "reference": 273.15}, "strictly increasing"),
        ({"x": T_X, "y": T_Y[:2], "reference": 288.15}, "same length"),
        ({"x": T_X, "y": T_Y, "reference": 288.15, "kind": "ratio"}, "'kind' must be one of"),
        ({"x": T_X, "y": T_Y, "reference": 288.15, "polynomial": (1.0,)}, "not both"),
        ({"reference": 288.15}, "not neither"),
        ({"polynomial": (1.01, 0.1), "reference": 288.15}, "must equal 1"),
    ],
)
def test_curve_validation(kwargs, match):
    with pytest.raises(InputError, match=match):
        CorrectionCurve("T_amb", **kwargs)


def test_from_points_normalises():
    c = CorrectionCurve.from_points("T_amb", T_X, (416.0, 400.0, 376.0), reference=288.15)
    np.testing.assert_allclose(c.y, T_Y, rtol=1e-15)
    a = CorrectionCurve.from_points(
        "T_amb", T_X, (2.0, 1.0, -1.0), reference=288.15, kind="additive"
    )
    np.testing.assert_allclose(a.y, (1.0, 0.0, -2.0), rtol=1e-15)


# --------------------------------------------------------------------------- applying


def test_apply_corrections_recovers_reference_result(power_curve):
    # Construct a measured value from a known reference result with the stated model
    # R_measured = F * R_ref + G, then correct it back.
    offset_curve = CorrectionCurve(
        "p_amb", polynomial=(0.0, 50.0), reference=101325.0, kind="additive", result="net_power"
    )
    cond = {"T_amb": 298.15, "p_amb": 100325.0}
    f = np.interp(298.15, T_X, T_Y)  # 0.96
    g = 50.0 * (100325.0 - 101325.0)  # -50 kW
    r_ref = 400e6
    measured = f * r_ref + g
    corrected = apply_corrections(measured, [power_curve, offset_curve], cond)
    assert corrected == pytest.approx(r_ref, rel=1e-14)  # round-off of three operations
    # At reference conditions nothing changes.
    same = apply_corrections(
        measured, [power_curve, offset_curve], {"T_amb": 288.15, "p_amb": 101325.0}
    )
    assert same == pytest.approx(measured, rel=1e-15)


def test_apply_corrections_series_and_frame(power_curve):
    idx = pd.date_range("2024-06-01", periods=3, freq="15min")
    measured = pd.Series([392e6, 396e6, 400e6], index=idx)
    cond = pd.DataFrame({"T_amb": [298.15, 293.15, 288.15]}, index=idx)
    out = apply_corrections(measured, [power_curve], cond)
    assert isinstance(out, pd.Series) and out.index.equals(idx)
    np.testing.assert_allclose(out, measured / np.interp(cond["T_amb"], T_X, T_Y), rtol=1e-15)


def test_apply_corrections_errors(power_curve):
    with pytest.raises(InputError, match="'T_amb'.*'net_power vs T_amb'"):
        apply_corrections(400e6, [power_curve], {"p_amb": 101325.0})
    with pytest.raises(InputError, match="T_amb = 320"):
        apply_corrections(400e6, [power_curve], {"T_amb": 320.0})
    with pytest.raises(InputError, match="CorrectionCurve or CorrectionSurface objects"):
        apply_corrections(400e6, ["curve"], {"T_amb": 290.0})


def test_correction_sensitivities_against_finite_differences(power_curve):
    add = CorrectionCurve(
        "p_amb", polynomial=(0.0, 50.0, 1e-3), reference=101325.0, kind="additive"
    )
    curves = [power_curve, add]
    cond = {"T_amb": 296.0, "p_amb": 100800.0}
    value = 395e6
    s = correction_sensitivities(value, curves, cond)
    h = {"value": 1e3, "T_amb": 1e-3, "p_amb": 1e-1}  # small against curve features
    for name, step in h.items():
        up, dn = dict(cond, value=value), dict(cond, value=value)
        up[name] += step
        dn[name] -= step
        fd = (
            apply_corrections(up["value"], curves, up) - apply_corrections(dn["value"], curves, dn)
        ) / (2 * step)
        # Piecewise linear in T and quadratic in p: central differences are exact up to
        # round-off of ~1e-16 * 4e8 / step, below 1e-6 relative for these steps.
        assert s[name] == pytest.approx(fd, rel=1e-6)


# --------------------------------------------------------------------------- guarantees


@pytest.mark.parametrize(
    ("direction", "value", "U95", "expected"),
    [
        # at_least, G = 100: met if value - U >= G, not met if value + U < G.
        ("at_least", 105.0, 3.0, "met"),
        ("at_least", 101.0, 1.0, "met"),  # boundary: 100 >= 100
        ("at_least", 101.0, 2.0, "inconclusive"),
        ("at_least", 99.0, 2.0, "inconclusive"),
        ("at_least", 98.0, 2.0, "inconclusive"),  # boundary: 100 is not < 100
        ("at_least", 97.0, 2.0, "not met"),
        ("at_least", 100.0, 0.0, "met"),
        # at_most, G = 100: met if value + U <= G, not met if value - U > G.
        ("at_most", 95.0, 3.0, "met"),
        ("at_most", 99.0, 1.0, "met"),  # boundary: 100 <= 100
        ("at_most", 99.0, 2.0, "inconclusive"),
        ("at_most", 102.0, 2.0, "inconclusive"),  # boundary: 100 is not > 100
        ("at_most", 103.0, 2.0, "not met"),
        ("at_most", 100.0, 0.0, "met"),
    ],
)
def test_verdict_truth_table(direction, value, U95, expected):
    g = Guarantee("corrected_net_power", 100.0, direction)
    assert g.verdict(value, U95) == expected


@pytest.mark.parametrize(
    ("value", "U95", "match"),
    [
        (100.0, -1.0, "'U95' must be a finite non-negative"),
        (100.0, float("nan"), "'U95'"),
        (float("nan"), 1.0, "corrected value must be a finite"),
        ("high", 1.0, "corrected value"),
    ],
)
def test_verdict_errors(value, U95, match):
    with pytest.raises(InputError, match=match):
        Guarantee("corrected_heat_rate", 2.5, "at_most").verdict(value, U95)


def test_guarantee_validation_and_margin():
    with pytest.raises(InputError, match="'direction' must be one of"):
        Guarantee("corrected_net_power", 1.0, "above")
    with pytest.raises(InputError, match="'guaranteed' must be a finite"):
        Guarantee("corrected_net_power", float("inf"), "at_least")
    assert Guarantee("x", 100.0, "at_least").margin(103.0) == pytest.approx(3.0)
    assert Guarantee("x", 100.0, "at_most").margin(103.0) == pytest.approx(-3.0)


# --------------------------------------------------------------------------- plant file


def test_curve_from_table_with_units_module():
    table = {
        "result": "net_power",
        "variable": "T_amb",
        "reference": {"value": 15.0, "unit": "degC"},
        "kind": "multiplicative",
        "curve": {"x": [0.0, 15.0, 30.0], "y": list(T_Y), "x_unit": "degC"},
    }
    c = curve_from_table(table)  # perftest.units.to_si; 0 degC = 273.15 K by definition
    np.testing.assert_allclose(c.x, T_X, rtol=1e-15)
    assert c.reference == pytest.approx(288.15, rel=1e-15)
    assert c.result == "net_power"


def test_polynomial_from_table_rescaled_to_si():
    # Polynomial in the deviation in degF: f = 1 - 0.002 d + 1e-5 d^2, d in degF.
    # Evaluated at 77 degF with reference 59 degF: d = 18 degF -> f by hand.
    table = {
        "result": "net_power",
        "variable": "T_amb",
        "kind": "multiplicative",
        "reference": {"value": 59.0, "unit": "degF"},
        "polynomial": [1.0, -0.002, 1e-5],
    }
    c = curve_from_table(table)
    x_si = (77.0 - 32.0) / 1.8 + 273.15  # degF -> K (exact definition)
    d = 18.0
    assert c(x_si) == pytest.approx(1.0 - 0.002 * d + 1e-5 * d**2, rel=1e-12)


def test_additive_curve_from_table_with_callback():
    calls = []

    def convert(values, unit, difference=False):
        calls.append((unit, difference))
        scale = {"MW": 1e6, "K": 1.0}[unit]
        return np.asarray(values, dtype=float) * scale

    table = {
        "result": "net_power",
        "variable": "T_cw",
        "kind": "additive",
        "reference": {"value": 300.0, "unit": "K"},
        "curve": {"x": [290.0, 300.0, 310.0], "y": [-1.0, 0.0, 2.0], "y_unit": "MW"},
    }
    c = curve_from_table(table, convert=convert)
    assert c.y == (-1e6, 0.0, 2e6)
    assert ("MW", True) in calls  # offsets converted as differences


@pytest.mark.parametrize(
    ("table", "match"),
    [
        ({"reference": 1.0, "curve": {"x": [0, 2], "y": [1, 1]}}, r"corrections\[3\]' needs 'var"),
        ({"variable": "T", "curve": {"x": [0, 2], "y": [1, 1]}}, "needs 'reference'"),
        ({"variable": "T", "reference": 1.0}, "needs 'curve', 'polynomial' or 'surface'"),
        ({"variable": "T", "reference": 1.0, "curve": {"x": [0, 2]}}, "'x' and 'y' lists"),
        ({"variable": "T", "reference": 5.0, "curve": {"x": [0, 2], "y": [1, 1]}}, "outside"),
        ({"variable": "T", "reference": 1.0, "curve": {"x": [0, "a"], "y": [1, 1]}}, "numbers"),
        (
            {
                "variable": "T",
                "reference": 1.0,
                "curve": {"x": [0, 2], "y": [1, 1], "y_unit": "MW"},
            },
            "only for additive",
        ),
    ],
)
def test_curve_from_table_errors(table, match):
    with pytest.raises(PlantFileError, match=match) as info:
        curve_from_table(table, convert=lambda v, u, difference=False: v, key="corrections[3]")
    assert info.value.key.startswith("corrections[3]")


def test_guarantees_from_plant_sections():
    # 9000 kJ/kWh = 2.5 J/J (docs/architecture.md, SI convention; 3600 kJ = 1 kWh).
    sections = {
        "guarantees": [
            {
                "quantity": "corrected_net_power",
                "value": 400,
                "unit": "MW",
                "direction": "at_least",
            },
            {
                "quantity": "corrected_heat_rate",
                "value": 9000,
                "unit": "kJ/kWh",
                "direction": "at_most",
            },
        ],
        "corrections": [
            {
                "result": "net_power",
                "variable": "T_amb",
                "reference": {"value": 288.15},
                "curve": {"x": list(T_X), "y": list(T_Y)},
            },
        ],
    }
    g = guarantees_from_plant(sections)
    assert g[0].guaranteed == pytest.approx(400e6, rel=1e-15)
    assert g[1].guaranteed == pytest.approx(2.5, rel=1e-12)
    assert g[1].unit == "kJ/kWh"
    c = curves_from_plant(sections)
    assert c[0](293.15) == pytest.approx(0.98, rel=1e-13)
    with pytest.raises(PlantFileError, match=r"guarantees\[0\].*'direction'"):
        guarantee_from_table(
            {"quantity": "q", "value": 1.0, "direction": "up"}, key="guarantees[0]"
        )


# --------------------------------------------------------------------------- scipy
# Outside check: the interpolation against scipy.interpolate and numpy.  Tables are
# illustrative numbers; the reference libraries compute the same rule
# independently, so agreement to round-off (1e-12 relative) is expected.

scipy_interpolate = pytest.importorskip("scipy.interpolate")


def test_table_interpolation_against_scipy_interp1d(power_curve):
    xs = np.random.default_rng(3).uniform(T_X[0], T_X[-1], 200)
    ref = scipy_interpolate.interp1d(T_X, T_Y, kind="linear")(xs)
    np.testing.assert_allclose(power_curve(xs), ref, rtol=1e-12)


def test_polynomial_against_numpy_polyval():
    coef = (1.0, -3e-3, 2e-5, -1e-7)  # ascending powers of (x - 288.15 K)
    c = CorrectionCurve(
        "T_amb", polynomial=coef, reference=288.15, valid_range=(250.0, 320.0), result="net_power"
    )
    xs = np.linspace(250.0, 320.0, 71)
    # np.polyval takes descending powers
    np.testing.assert_allclose(c(xs), np.polyval(coef[::-1], xs - 288.15), rtol=1e-13)
    der = np.polyder(np.array(coef[::-1]))
    np.testing.assert_allclose(c.derivative(xs), np.polyval(der, xs - 288.15), rtol=1e-12)


# Ambient temperature [K] x relative humidity [-]: output factor (illustrative numbers).
S_X = (268.15, 278.15, 288.15, 298.15, 308.15)
S_Y = (0.2, 0.6, 1.0)
S_V = (
    (1.050, 1.046, 1.041),
    (1.027, 1.024, 1.020),
    (1.003, 1.000, 0.996),
    (0.975, 0.971, 0.966),
    (0.944, 0.939, 0.933),
)


@pytest.fixture
def surface():
    return CorrectionSurface(
        "T_amb", "RH", S_X, S_Y, S_V, reference=288.15, second_reference=0.6, result="net_power"
    )


def test_surface_interpolation_against_regular_grid_interpolator(surface):
    ref = scipy_interpolate.RegularGridInterpolator((S_X, S_Y), np.array(S_V), method="linear")
    rng = np.random.default_rng(5)
    pts = np.column_stack([rng.uniform(S_X[0], S_X[-1], 300), rng.uniform(0.2, 1.0, 300)])
    np.testing.assert_allclose(surface(pts[:, 0], pts[:, 1]), ref(pts), rtol=1e-12)
    # grid nodes are returned exactly
    assert surface(278.15, 1.0) == pytest.approx(1.020, rel=1e-15)
    with pytest.raises(InputError, match=r"RH = 1\.1 lies outside"):
        surface(290.0, 1.1)


def test_surface_partials_against_finite_differences(surface):
    h = 1e-6
    for x, y in ((281.0, 0.3), (300.0, 0.9)):  # cell interiors: the quotient is exact
        dx, dy = surface.partials(x, y)
        assert dx == pytest.approx((surface(x + h, y) - surface(x - h, y)) / (2 * h), rel=1e-6)
        assert dy == pytest.approx((surface(x, y + h) - surface(x, y - h)) / (2 * h), rel=1e-6)
    # on the grid line x = 288.15: the mean of the two adjacent cells' slopes
    left = ((1.000 - 1.024) * 0.5 + (0.996 - 1.020) * 0.5) / 10.0
    right = ((0.971 - 1.000) * 0.5 + (0.966 - 0.996) * 0.5) / 10.0
    assert surface.partials(288.15, 0.8)[0] == pytest.approx(0.5 * (left + right), rel=1e-12)


def test_surface_in_apply_corrections_and_sensitivities(surface, power_curve):
    cond = {"T_amb": 296.0, "RH": 0.75}
    f = float(
        scipy_interpolate.RegularGridInterpolator((S_X, S_Y), np.array(S_V))([[296.0, 0.75]])[0]
    )
    assert apply_corrections(100e6, [surface], cond) == pytest.approx(100e6 / f, rel=1e-13)
    s = correction_sensitivities(100e6, [surface], cond)
    for name, step in (("T_amb", 1e-4), ("RH", 1e-6)):
        up, dn = dict(cond), dict(cond)
        up[name] += step
        dn[name] -= step
        fd = (apply_corrections(100e6, [surface], up) - apply_corrections(100e6, [surface], dn)) / (
            2 * step
        )
        assert s[name] == pytest.approx(fd, rel=1e-6)  # bilinear: exact but round-off


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"values": S_V[:4]}, "'values' must be 5 rows"),
        ({"x": (268.15, 268.15, 288.15, 298.15, 308.15)}, "strictly increasing"),
        ({"reference": 310.0}, "'reference' 310 lies outside"),
        ({"second_reference": 0.2}, "must equal 1 at the reference point"),
        ({"kind": "ratio"}, "'kind' must be one of"),
    ],
)
def test_surface_validation(kwargs, match):
    args = dict(x=S_X, y=S_Y, values=S_V, reference=288.15, second_reference=0.6)
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        CorrectionSurface("T_amb", "RH", args.pop("x"), args.pop("y"), args.pop("values"), **args)


def test_surface_from_plant_table_with_units():
    table = {
        "result": "net_power",
        "variable": "T_amb",
        "reference": {"value": 15.0, "unit": "degC"},
        "second_variable": "RH",
        "second_reference": {"value": 60.0, "unit": "%"},
        "surface": {
            "x": [-5.0, 5.0, 15.0, 25.0, 35.0],
            "x_unit": "degC",
            "y": [20.0, 60.0, 100.0],
            "y_unit": "%",
            "values": [list(r) for r in S_V],
        },
    }
    s = curve_from_table(table)
    assert isinstance(s, CorrectionSurface) and s.variables == ("T_amb", "RH")
    assert s.x == pytest.approx(S_X) and s.y == pytest.approx(S_Y)
    assert s(296.0, 0.75) == pytest.approx(
        CorrectionSurface("T_amb", "RH", S_X, S_Y, S_V, reference=288.15, second_reference=0.6)(
            296.0, 0.75
        ),
        rel=1e-12,
    )
    bad = dict(table)
    del bad["second_reference"]
    with pytest.raises(PlantFileError, match="needs 'second_reference'"):
        curve_from_table(bad, key="corrections[1]")


# --------------------------------------------------------------------------- Monte Carlo
# Outside check: the linear propagation of evaluate() for a corrected result (curve
# and two-variable table driven by measured conditions) against a Monte Carlo
# propagation with numpy (JCGM 101:2008, 7.2-7.6), with the correction computed by
# scipy's interpolators, not by perftest.

_MC_PLANT = """
[site]
name = "Correction bench"
atmospheric_pressure = { value = 101.325, unit = "kPa" }

[tags.JT-1]
unit = "MW"
[tags.FT-F]
unit = "kg/s"
[tags.TT-S]
unit = "K"
[tags.TT-K]
unit = "K"
[tags.TT-A]
unit = "K"
[tags.RH-A]
unit = "1"

[performance]
gross_power = "JT-1"
heat_input = "fuel"
source_temperature = "TT-S"
sink_temperature = "TT-K"

[fuel]
mass_flow = "FT-F"
lhv = { value = 50.0, unit = "MJ/kg" }
uncertainty = { value = 0.5, kind = "percent", level = "standard" }
exergy_ratio = 1.04

[[corrections]]
result = "net_power"
variable = "TT-K"
reference = { value = 290.0, unit = "K" }
curve = { x = [280.0, 290.0, 305.0, 315.0], y = [1.01, 1.0, 0.97, 0.95], x_unit = "K" }

[[corrections]]
result = "net_power"
variable = "TT-A"
reference = { value = 288.15, unit = "K" }
second_variable = "RH-A"
second_reference = { value = 0.6, unit = "1" }
[corrections.surface]
x = [268.15, 278.15, 288.15, 298.15, 308.15]
y = [0.2, 0.6, 1.0]
values = [
    [1.050, 1.046, 1.041],
    [1.027, 1.024, 1.020],
    [1.003, 1.000, 0.996],
    [0.975, 0.971, 0.966],
    [0.944, 0.939, 0.933],
]

[[corrections]]
result = "net_power"
variable = "TT-A"
reference = { value = 288.15, unit = "K" }
kind = "additive"
polynomial = [0.0, -20000.0]
"""


def test_corrected_result_uncertainty_against_monte_carlo(tmp_path):
    from perftest.evaluation.results import evaluate
    from perftest.plant.file import load_plant

    path = tmp_path / "plant.toml"
    path.write_text(_MC_PLANT, encoding="utf-8")
    values = {"JT-1": 30e6, "FT-F": 2.0, "TT-S": 600.0, "TT-K": 300.0, "TT-A": 296.0, "RH-A": 0.5}
    u = {"JT-1": 0.09e6, "FT-F": 0.01, "TT-S": 1.0, "TT-K": 1.5, "TT-A": 1.0, "RH-A": 0.03}
    perf = evaluate(load_plant(path), StandIn(values, u), monte_carlo=False)

    rng = np.random.default_rng(17)
    n = 200_000
    d = {k: values[k] + u[k] * rng.standard_normal(n) for k in values}
    f1 = scipy_interpolate.interp1d([280.0, 290.0, 305.0, 315.0], [1.01, 1.0, 0.97, 0.95])(
        d["TT-K"]
    )
    f2 = scipy_interpolate.RegularGridInterpolator((S_X, S_Y), np.array(S_V))(
        np.column_stack([d["TT-A"], d["RH-A"]])
    )
    g = -20000.0 * (d["TT-A"] - 288.15)
    corrected = (d["JT-1"] - g) / (f1 * f2)
    # 200 000 trials estimate a standard deviation to 1/sqrt(2n) = 0.16 %; the curve
    # kinks within +-2u of the conditions make the linearisation good to about 1 %,
    # so 3 % covers both.
    assert perf.uncertainty("corrected_net_power") == pytest.approx(corrected.std(ddof=1), rel=0.03)
    assert perf.value("corrected_net_power") == pytest.approx(corrected.mean(), rel=1e-3)
    # the size of each correction is reported: the surface alone changes the
    # result by P/f2 - P at the test conditions
    row = perf.corrections[perf.corrections["variable"] == "TT-A & RH-A"].iloc[0]
    f2_0 = float(
        scipy_interpolate.RegularGridInterpolator((S_X, S_Y), np.array(S_V))([[296.0, 0.5]])[0]
    )
    assert row["factor"] == pytest.approx(f2_0, rel=1e-12)
    assert row["relative_change"] == pytest.approx(1 / f2_0 - 1, rel=1e-9)


# --------------------------------------------------------------------------- verdict rules
# Hand-worked cases, G = 100 (at_least) or 100 (at_most), U95 = 2.  The rules are
# the usual contract conventions: guard bands on both sides (JCGM 106:2012,
# guarded acceptance and rejection, from memory), test uncertainty granted to the
# supplier (JCGM 106 guarded rejection; common practice, no source), plain
# comparison (JCGM 106 simple acceptance), and a fixed contractual tolerance
# (common practice, no source).


@pytest.mark.parametrize(
    ("rule", "direction", "value", "tol", "expected"),
    [
        # supplier_benefit, at_least: met iff y + U >= G
        ("supplier_benefit", "at_least", 98.0, None, "met"),  # boundary 98 + 2 = 100
        ("supplier_benefit", "at_least", 97.9, None, "not met"),
        ("supplier_benefit", "at_least", 103.0, None, "met"),
        # supplier_benefit, at_most: met iff y - U <= G
        ("supplier_benefit", "at_most", 102.0, None, "met"),
        ("supplier_benefit", "at_most", 102.1, None, "not met"),
        # plain: y >= G (at_least), y <= G (at_most); U ignored
        ("plain", "at_least", 100.0, None, "met"),
        ("plain", "at_least", 99.99, None, "not met"),
        ("plain", "at_most", 100.01, None, "not met"),
        ("plain", "at_most", 99.0, None, "met"),
        # tolerance T = 0.5: at_least met iff y + T >= G; at_most iff y - T <= G
        ("tolerance", "at_least", 99.5, 0.5, "met"),
        ("tolerance", "at_least", 99.4, 0.5, "not met"),
        ("tolerance", "at_most", 100.5, 0.5, "met"),
        ("tolerance", "at_most", 100.6, 0.5, "not met"),
        # guarded, same as the default truth table above
        ("guarded", "at_least", 101.0, None, "inconclusive"),
        ("guarded", "at_least", 102.0, None, "met"),
    ],
)
def test_verdict_rules_truth_table(rule, direction, value, tol, expected):
    g = Guarantee("corrected_net_power", 100.0, direction, rule=rule, tolerance=tol)
    assert g.verdict(value, 2.0) == expected


def test_only_the_guarded_rule_is_ever_inconclusive():
    ys = np.linspace(95.0, 105.0, 201)
    for rule in RULES:
        for direction in ("at_least", "at_most"):
            g = Guarantee(
                "q", 100.0, direction, rule=rule, tolerance=0.5 if rule == "tolerance" else None
            )
            verdicts = {g.verdict(y, 2.0) for y in ys}
            assert ("inconclusive" in verdicts) == (rule == "guarded"), (rule, direction)
            # every rule is monotone: a better value never turns met into not met
            order = ys if direction == "at_least" else ys[::-1]
            seq = [g.verdict(y, 2.0) for y in order]
            first_met = seq.index("met")
            assert all(v == "met" for v in seq[first_met:]), (rule, direction)


def test_rule_statements_name_the_rule_and_inequality():
    g = Guarantee("corrected_heat_rate", 2.5, "at_most", rule="supplier_benefit", unit="kJ/kWh")
    s = g.statement()
    assert s.startswith("Rule supplier_benefit") and "y - U95 <= G" in s
    t = Guarantee(
        "corrected_net_power", 30e6, "at_least", rule="tolerance", tolerance=0.3e6, unit="MW"
    )
    assert "0.3 MW" in t.statement() and "y + T >= G" in t.statement()
    assert "inconclusive" in Guarantee("x", 1.0, "at_least").statement()


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"rule": "lenient"}, "'rule' must be one of"),
        ({"rule": "tolerance"}, "needs a finite non-negative 'tolerance'"),
        ({"rule": "tolerance", "tolerance": -1.0}, "needs a finite non-negative"),
        ({"rule": "plain", "tolerance": 1.0}, "'tolerance' is only used by rule 'tolerance'"),
    ],
)
def test_rule_validation(kwargs, match):
    with pytest.raises(InputError, match=match):
        Guarantee("corrected_net_power", 1.0, "at_least", **kwargs)


_G_PLANT = """
[site]
name = "Rules"

[tags.JT-1]
unit = "MW"

[acceptance]
rule = "supplier_benefit"

[[guarantees]]
quantity = "corrected_net_power"
value = 400
unit = "MW"
direction = "at_least"

[[guarantees]]
quantity = "corrected_heat_rate"
value = 9000
unit = "kJ/kWh"
direction = "at_most"
rule = "tolerance"
tolerance = { value = 1.0, kind = "percent" }

[[guarantees]]
quantity = "net_power"
value = 400
unit = "MW"
direction = "at_least"
rule = "tolerance"
tolerance = { value = 2, unit = "MW" }
"""


def test_rules_from_the_plant_file(tmp_path):
    from perftest.plant.file import load_plant

    path = tmp_path / "plant.toml"
    path.write_text(_G_PLANT, encoding="utf-8")
    g = guarantees_from_plant(load_plant(path))
    assert [x.rule for x in g] == ["supplier_benefit", "tolerance", "tolerance"]
    assert g[1].tolerance == pytest.approx(0.01 * 2.5, rel=1e-12)  # 1 % of 9000 kJ/kWh in J/J
    assert g[2].tolerance == pytest.approx(2e6, rel=1e-12)


@pytest.mark.parametrize(
    ("old", "new", "match", "line_of"),
    [
        ('rule = "supplier_benefit"', 'rule = "lenient"', "'rule' must be one of",
         'rule = "lenient"'),
        ('[acceptance]\nrule = "supplier_benefit"', '[acceptance]\nrules = "plain"',
         "unknown key 'rules'", 'rules = "plain"'),
        ('rule = "tolerance"\ntolerance = { value = 1.0, kind = "percent" }\n',
         'rule = "tolerance"\n', "rule 'tolerance' needs tolerance", 'rule = "tolerance"'),
        ('tolerance = { value = 2, unit = "MW" }', 'tolerance = { value = 2, kind = "%" }',
         "'kind' must be", 'tolerance = { value = 2, kind = "%" }'),
        ('direction = "at_most"', 'direction = "below"', "'direction' must be one of",
         'direction = "below"'),
        ('value = 9000', 'value = "high"', "must be a number", 'value = "high"'),
        ('unit = "kJ/kWh"\n', 'unit = "kJ/kWh"\nmargin = 3\n', "unknown key 'margin'",
         "margin = 3"),
    ],
)  # fmt: skip
def test_bad_guarantee_keys_name_key_and_line(tmp_path, old, new, match, line_of):
    from perftest.plant.file import load_plant

    text = _G_PLANT.replace(old, new, 1)
    assert text != _G_PLANT
    path = tmp_path / "plant.toml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(PlantFileError, match=match) as info:
        guarantees_from_plant(load_plant(path))
    lines = text.splitlines()
    assert info.value.line == lines.index(line_of) + 1, str(info.value)


def test_rule_reaches_summary_json_and_markdown(tmp_path):
    """The rule name and its sentence appear in summary.json rows and the report."""
    from perftest import report
    from perftest.evaluation.results import evaluate
    from perftest.plant.file import load_plant

    text = _MC_PLANT + (
        '\n[acceptance]\nrule = "plain"\n\n[[guarantees]]\nquantity = "corrected_net_power"\n'
        'value = 29.0\nunit = "MW"\ndirection = "at_least"\n'
    )
    path = tmp_path / "plant.toml"
    path.write_text(text, encoding="utf-8")
    plant = load_plant(path)
    values = {"JT-1": 30e6, "FT-F": 2.0, "TT-S": 600.0, "TT-K": 300.0, "TT-A": 296.0, "RH-A": 0.5}
    u = {"JT-1": 0.09e6, "FT-F": 0.01, "TT-S": 1.0, "TT-K": 1.5, "TT-A": 1.0, "RH-A": 0.03}
    perf = evaluate(plant, StandIn(values, u), monte_carlo=False)
    data = report.collect(plant, performance=perf)
    row = report.summary_json(data)["guarantees"][0]
    for key in ("quantity", "corrected_value", "U95", "guaranteed", "direction", "verdict"):
        assert key in row
    assert row["rule"] == "plain" and row["rule_statement"].startswith("Rule plain")
    assert row["verdict"] == ("met" if row["corrected_value"] >= 29e6 else "not met")
    md = report.render_markdown(data)
    assert row["rule_statement"] in md
    assert "change [%]" in md  # the size of every correction is tabulated
