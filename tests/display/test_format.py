"""Display formatting: rounding to the uncertainty, units that belong to their numbers."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from perftest import display as D
from perftest.errors import InputError
from perftest.units import to_si


@pytest.mark.parametrize(
    ("value", "U", "expected"),
    # GUM (JCGM 100:2008) 7.2.2 example (from memory): m_S = 100.021 47 g with
    # u_c = 0.35 mg, i.e. 0.000 35 g: the value keeps the place of the second
    # significant digit of the uncertainty.
    [(100.02147, 0.00035, ("100.02147", "0.00035")),
     # GUM 7.2.6: at most two significant digits of U, the value rounded to match.
     (33.85465, 0.07012, ("33.855", "0.070")),
     (11475.7, 71.7, ("11476", "72")),
     (11475.7, 171.7, ("11480", "170")),
     (-0.012345, 0.0021, ("−0.0123", "0.0021"))],
)  # fmt: skip
def test_value_rounded_to_two_digits_of_U(value, U, expected):
    assert D.fmt_uncertain(value, U) == expected


def test_no_e_notation_over_many_decades():
    for exponent in range(-15, 13):
        for mantissa in (1.0, 1.19, -4.7):
            text = D.fmt_number(mantissa * 10.0**exponent)
            assert "e" not in text.lower(), text
            v, U = D.fmt_uncertain(mantissa * 10.0**exponent, 0.013 * 10.0**exponent)
            assert "e" not in (v + U).lower(), (v, U)


def test_large_numbers_keep_their_integer_digits():
    # 4 significant digits never drop integer digits: a reader must not see 1.2e6
    assert D.fmt_number(1_188_804.2) == "1188804"
    assert D.fmt_number(1.4e-14) == "0"  # zero to a millionth of the unit shown


def test_degrees_of_freedom():
    from scipy.stats import t

    assert D.fmt_dof(math.inf) == "∞"
    assert D.fmt_dof(1.19e6) == ">1000"
    assert D.fmt_dof(12.4) == "12"
    # Why 1000 is the limit: the Student factor differs from the normal one by
    # 0.12 % there, below the two digits U95 is stated with (scipy as reference).
    assert abs(t.ppf(0.975, 1000) / 1.959963984540054 - 1) < 1.5e-3


def test_coverage_factor_from_student_t():
    # Student t table, 95 % two-sided, 10 degrees of freedom: 2.228 (any statistics
    # table, e.g. GUM Table G.2: t_95(10) = 2.23; from memory).
    assert D.k95(10) == pytest.approx(2.228, abs=5e-4)  # table gives 3 decimals
    assert D.k95(math.inf) == pytest.approx(1.96, abs=5e-3)


@pytest.mark.parametrize(
    ("si", "unit", "quantity", "kw"),
    [(36.0, "t/h", "mass_flow", {}),
     (9.0e6, "barg", "pressure", {}),  # no barometer: falls back to absolute bar
     (9.0e6, "barg", "pressure", {"atmospheric_pressure": 100_800.0}),
     (277.0, "m3/h", "mass_flow", {}),  # no density: falls back to kg/s
     (277.0, "m3/h", "mass_flow", {"density": 998.2}),
     (783.15, "degC", "temperature", {}),
     (2.5, "kJ/kWh", "heat_rate", {}),
     (3.6e7, None, "power", {})],
)  # fmt: skip
def test_the_label_names_the_unit_of_the_number(si, unit, quantity, kw):
    """Whatever unit is shown, converting the shown number back from the shown label
    gives the SI value: a label never stands beside a number in another unit."""
    value, label = D.convert(si, unit, quantity=quantity, **kw)
    assert label, "a known quantity always gets a label"
    back_kw = {}
    if label == "barg":
        back_kw["atmospheric_pressure"] = kw["atmospheric_pressure"]
    if label == "m3/h":
        back_kw["density"] = kw["density"]
    back = to_si(float(value), label, quantity=quantity, **back_kw)
    assert back == pytest.approx(si, rel=1e-12)  # exact unit factors: round-off only


def test_result_units_are_generic_over_result_names():
    assert D.result_unit("net_power", "W", 3.4e7)[:2] == ("MW", 1e-6)
    assert D.result_unit("heat_export", "W", 4.0e5)[:2] == ("kW", 1e-3)
    assert D.result_unit("corrected_cooling_capacity", "W", 2.0e6)[0] == "MW"
    # 1 J/J = 3600 kJ/kWh (definition: 1 kWh = 3600 kJ)
    unit, scale, _ = D.result_unit("heat_rate", "J/J")
    assert unit == "kJ/kWh" and 2.5 * scale == pytest.approx(9000.0, rel=1e-15)
    assert D.result_unit("fuel_utilisation", "1")[:2] == ("%", 100.0)
    assert D.result_unit("cop", "1")[0] == "1" and D.unit_label("1") == "–"
    assert D.result_unit("carnot_cop", "1")[0] == "1"
    assert D.result_unit("power_to_heat_ratio", "1")[0] == "1"
    unit, scale, offset = D.result_unit("source_temperature", "K")
    assert D.unit_label(unit) == "°C" and 273.15 * scale + offset == pytest.approx(0.0)


def test_resolve_units_modes_and_errors():
    tags, qs, logged = ["FT-1", "TT-1"], ["mass_flow", "temperature"], ["t/h", "degF"]
    assert D.resolve_units(tags, qs, logged, "logged") == ["t/h", "degF"]
    assert D.resolve_units(tags, qs, logged, "si") == ["kg/s", "K"]
    assert D.resolve_units(tags, qs, logged, "engineering") == ["kg/s", "degC"]
    assert D.resolve_units(tags, qs, logged, {"temperature": "K"}) == ["t/h", "K"]
    with pytest.raises(InputError, match="'units' parameter"):
        D.resolve_units(tags, qs, logged, "metric")
    with pytest.raises(InputError, match="furlong"):
        D.resolve_units(tags, qs, logged, {"FT-1": "furlong/fortnight"})


def test_html_table_escapes_and_aligns():
    html = D.html_table(["tag", "mean"], [["<b>x</b>", "1.5"]], flags=[True])
    assert "<b>x</b>" not in html and "&lt;b&gt;" in html
    assert 'class="num">1.5<' in html and 'class="txt">&lt;b' in html
    assert "class=flag" in html


def test_text_table_is_short():
    rows = [[f"T{i}", str(i)] for i in range(30)]
    text = D.text_table(["tag", "n"], rows, limit=5)
    assert len(text.splitlines()) == 7 and re.search(r"25 more", text)
    assert np.all([len(line) < 40 for line in text.splitlines()])
