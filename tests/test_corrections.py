"""Tests of perftest.corrections: curves, corrections and guarantee verdicts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from perftest.corrections import (
    CorrectionCurve,
    Guarantee,
    apply_corrections,
    correction_sensitivities,
    curve_from_table,
    curves_from_plant,
    guarantee_from_table,
    guarantees_from_plant,
)
from perftest.errors import InputError, PlantFileError

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
    with pytest.raises(InputError, match="CorrectionCurve objects"):
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
        ({"variable": "T", "reference": 1.0}, "needs 'curve' or 'polynomial'"),
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
