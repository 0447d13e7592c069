"""Tests of perftest.units against NIST SP 811 (2008) and the trade's conventions.

Conversion factors are read from NIST Special Publication 811 (2008 edition),
"Guide for the Use of the International System of Units (SI)", Appendix B.8
(factors in alphabetical order) and B.9 (factors by kind of quantity).  The table
prints most factors to 7 significant digits; the check allows half a unit in the
last printed digit, which is the rounding of the table itself.  Values marked
"from memory" were recalled rather than read from the document at the time of
writing.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from perftest.errors import DataError, InputError, UnitError
from perftest.units import (
    QUANTITIES,
    UnitSpec,
    check_absolute_pressure,
    compatible,
    from_si,
    nonpositive_pressure,
    parse_unit,
    quantity_of,
    si_unit,
    to_si,
)


def nist(mantissa: str, exponent: int) -> tuple[float, float]:
    """A factor as printed in SP 811 and half a unit in its last printed digit."""
    digits = len(mantissa.replace(".", "").replace(" ", "")) - 1
    value = float(mantissa.replace(" ", "")) * 10.0**exponent
    return value, 0.5 * 10.0 ** (exponent - digits)


# (unit, quantity, NIST factor to SI as printed, exponent, where in SP 811)
NIST_FACTORS = [
    ("psia", "pressure", "6.894 757", 3, "B.8, pound-force per square inch (psi)"),
    ("inHg", "pressure", "3.386 389", 3, "B.8, inch of mercury, conventional"),
    ("mmHg", "pressure", "1.333 224", 2, "B.8, millimeter of mercury, conventional"),
    ("inH2O", "pressure", "2.490 889", 2, "B.8, inch of water, conventional"),
    ("torr", "pressure", "1.333 224", 2, "B.8, torr (Torr)"),
    ("atm", "pressure", "1.013 25", 5, "B.8, atmosphere, standard (exact)"),
    ("kgf/cm2", "pressure", "9.806 65", 4, "B.8, kilogram-force per square centimeter (exact)"),
    ("bar", "pressure", "1.0", 5, "B.8, bar (exact)"),
    ("mbar", "pressure", "1.0", 2, "B.8, millibar (exact)"),
    ("Btu", "energy", "1.055 056", 3, "B.8, British thermal unit_IT"),
    ("kWh", "energy", "3.6", 6, "B.8, kilowatt hour (exact)"),
    ("Btu/h", "heat_flow", "2.930 711", -1, "B.8, British thermal unit_IT per hour"),
    ("hp", "power", "7.456 999", 2, "B.8, horsepower (550 ft lbf/s)"),
    ("Btu/lb", "specific_enthalpy", "2.326", 3, "B.8, Btu_IT per pound (exact)"),
    ("kcal/kg", "specific_enthalpy", "4.1868", 3, "B.8, calorie_IT per gram (exact)"),
    ("Btu/(lb F)", "specific_entropy", "4.1868", 3, "B.8, Btu_IT per pound degF (exact)"),
    ("lb/h", "mass_flow", "1.259 979", -4, "B.8, pound per hour"),
    ("lb/s", "mass_flow", "4.535 924", -1, "B.8, pound per second"),
    ("gpm", "volume_flow", "6.309 020", -5, "B.8, gallon (U.S.) per minute"),
    ("ft3/min", "volume_flow", "4.719 474", -4, "B.8, cubic foot per minute"),
    ("lb/ft3", "density", "1.601 846", 1, "B.8, pound per cubic foot"),
    ("rpm", "speed", "1.047 198", -1, "B.8, revolution per minute"),
]


@pytest.mark.parametrize("unit, quantity, mantissa, exponent, where", NIST_FACTORS)
def test_factor_against_nist_sp811(unit, quantity, mantissa, exponent, where):
    expected, tol = nist(mantissa, exponent)
    # tolerance: half a unit in the last digit SP 811 prints (its own rounding)
    assert to_si(1.0, unit, quantity=quantity) == pytest.approx(expected, abs=tol)
    assert quantity_of(unit) == quantity


def test_pound_is_exact():
    # NIST SP 811 B.8: 1 lb (avoirdupois) = 0.453 592 37 kg exactly; 1 klb/h = 1000 lb/h.
    # tolerance: two ulps of the product (exact definition, only float rounding left)
    assert to_si(3600.0, "lb/h") == pytest.approx(0.45359237, rel=4e-16)
    assert to_si(3.6, "klb/h") == pytest.approx(0.45359237, rel=4e-16)


def test_btu_per_pound_is_exactly_2326_j_per_kg():
    # NIST SP 811 B.8: Btu_IT/lb = 2.326 E+03 J/kg exactly.  pint's bare Btu
    # (1055.056 J) would give 2326.00013; the alias table must use Btu_IT.
    # tolerance: float rounding only (exact by definition)
    assert to_si(1.0, "Btu/lb") == pytest.approx(2326.0, rel=1e-14)


@pytest.mark.parametrize(
    "value, unit, kelvin",
    [
        # NIST SP 811 B.9: T/K = t/degC + 273.15; T/K = (t/degF + 459.67)/1.8; T/K = (T/degR)/1.8
        (0.0, "degC", 273.15),
        (100.0, "°C", 373.15),
        (32.0, "degF", 273.15),
        (212.0, "°F", 373.15),
        (-40.0, "degF", 233.15),
        (491.67, "degR", 273.15),
        (300.0, "K", 300.0),
        (25.0, "DEGC", 298.15),
        (25.0, "deg C", 298.15),
        (77.0, "F", 298.15),
    ],
)
def test_temperature_formulas_nist_b9(value, unit, kelvin):
    # tolerance: 1e-9 K, far below any instrument; the formulas are exact
    assert to_si(value, unit) == pytest.approx(kelvin, abs=1e-9)


def test_temperature_difference_scales_only():
    # A 9 degF interval is 5 K (NIST SP 811 B.9: 1 degF interval = 1/1.8 K)
    # tolerance: float rounding of 5/9
    assert to_si(9.0, "degF", difference=True) == pytest.approx(5.0, rel=1e-14)
    assert to_si(9.0, "delta_degF") == pytest.approx(5.0, rel=1e-14)
    assert to_si(2.0, "degC", quantity="temperature_difference") == 2.0
    assert to_si(2.0, "delta_degC") == 2.0
    assert parse_unit("delta_degC").quantity == "temperature_difference"
    assert from_si(5.0, "degF", difference=True) == pytest.approx(9.0, rel=1e-14)


def test_heat_rate_units():
    # 1 kWh = 3600 kJ (NIST SP 811 B.8, kilowatt hour = 3.6 E+06 J exactly), so a heat
    # rate of 9000 kJ/kWh is 2.5 J/J; 3412.14 Btu/kWh is 1 J/J (100 % efficiency,
    # common practice, no source) since 3.6e6 / 1055.05585 = 3412.14.
    # tolerance: float rounding (exact factors)
    assert to_si(9000.0, "kJ/kWh") == pytest.approx(2.5, rel=1e-14)
    assert to_si(9000.0, "MJ/MWh") == pytest.approx(2.5, rel=1e-14)
    assert from_si(2.5, "kJ/kWh") == pytest.approx(9000.0, rel=1e-14)
    # tolerance: 3412.14 is rounded to 6 digits
    assert to_si(3412.14, "Btu/kWh") == pytest.approx(1.0, abs=2e-6)
    # kJ/kWh <-> Btu/kWh: 1 Btu_IT = 1.055 056 kJ (NIST SP 811 B.8)
    hr_btu = from_si(to_si(10000.0, "kJ/kWh"), "Btu/kWh")
    expected, tol = nist("1.055 056", 0)
    # tolerance: the 7-digit rounding of the NIST factor, scaled to the value
    assert 10000.0 / hr_btu == pytest.approx(expected, abs=tol)
    # kcal_IT: 1 kcal/kWh = 4.1868 kJ / 3600 kJ (NIST SP 811 B.8, calorie_IT = 4.1868 J)
    assert to_si(1.0, "kcal/kWh") == pytest.approx(4.1868 / 3600.0, rel=1e-14)
    assert quantity_of("kJ/kWh") == "heat_rate"


def test_gauge_pressure_with_scalar_reference():
    # p_abs = p_gauge + p_atm (definition of gauge pressure; common practice, no source)
    assert to_si(1.0, "barg", atmospheric_pressure=101325.0) == 201325.0
    assert to_si(10.0, "kPa(g)", atmospheric_pressure=100000.0) == 110000.0
    # psig: 14.696 psi is one standard atmosphere (NIST SP 811 B.8 factors; from memory)
    # tolerance: 14.696 is rounded to 5 digits, i.e. 3 Pa
    assert to_si(0.0, "psig", atmospheric_pressure=to_si(14.696, "psia")) == pytest.approx(
        101325.0, abs=3.0
    )
    assert parse_unit("barg").gauge and not parse_unit("bara").gauge


def test_vacuum_is_atmosphere_minus_reading():
    # condenser vacuum: 28 inHg vacuum at 29.92 inHg barometer -> 1.92 inHg absolute
    # (definition of vacuum gauge reading; common practice, no source)
    atm = to_si(29.92, "inHg")
    p = to_si(28.0, "inHg vac", atmospheric_pressure=atm)
    # tolerance: float rounding of the difference of two ~1e5 Pa numbers
    assert p == pytest.approx(to_si(1.92, "inHg"), abs=1e-9)


def test_gauge_with_logged_barometer_is_aligned_by_index():
    idx = pd.date_range("2024-05-01 10:00", periods=3, freq="1min", tz="UTC")
    gauge = pd.Series([1.0, 2.0, 3.0], index=idx, name="PT-101")
    # barometer logged in reverse order: must be matched by time, not by position
    baro = pd.Series([100000.0, 100100.0, 100200.0], index=idx[::-1])
    out = to_si(gauge, "barg", atmospheric_pressure=baro)
    assert isinstance(out, pd.Series) and out.index.equals(idx) and out.name == "PT-101"
    np.testing.assert_array_equal(out.to_numpy(), [200200.0, 300100.0, 400000.0])
    back = from_si(out, "barg", atmospheric_pressure=baro)
    # tolerance: float rounding on 1e5 Pa
    np.testing.assert_allclose(back.to_numpy(), gauge.to_numpy(), atol=1e-9)


def test_gauge_difference_needs_no_reference():
    # an uncertainty of 0.1 bar is 1e4 Pa whether the gauge is g or a
    assert to_si(0.1, "barg", difference=True) == pytest.approx(1e4, rel=1e-14)


def test_volume_flow_to_mass_flow_with_density():
    # 3600 m3/h of water at 1000 kg/m3 is 1000 kg/s (definition; exact)
    assert to_si(3600.0, "m3/h", density=1000.0) == pytest.approx(1000.0, rel=1e-14)
    assert to_si(3600.0, "m³/h") == pytest.approx(1.0, rel=1e-14)
    assert to_si(1000.0, "l/s", quantity="mass_flow", density=998.0) == pytest.approx(998.0)
    assert from_si(1000.0, "m3/h", density=1000.0) == pytest.approx(3600.0, rel=1e-14)


def test_volumetric_heating_value_needs_density():
    # 36 MJ/m3 at 0.8 kg/m3 is 45 MJ/kg (definition; exact)
    assert to_si(36.0, "MJ/m3", density=0.8) == pytest.approx(45e6, rel=1e-14)
    with pytest.raises(UnitError, match="needs the gas density"):
        to_si(36.0, "MJ/m3")


def test_series_and_array_shapes():
    idx = pd.Index([3, 1, 2])
    s = pd.Series([0.0, 36.0, 72.0], index=idx, name="FT-1")
    out = to_si(s, "t/h")
    assert isinstance(out, pd.Series) and out.index.equals(idx) and out.name == "FT-1"
    np.testing.assert_allclose(out.to_numpy(), [0.0, 10.0, 20.0], rtol=1e-14)
    arr = to_si(np.array([[1.0, 2.0], [3.0, np.nan]]), "kW")
    assert arr.shape == (2, 2) and np.isnan(arr[1, 1])
    assert isinstance(to_si(1.0, "MW"), float)
    df = pd.DataFrame({"a": [1.0], "b": [2.0]})
    assert list(to_si(df, "kW").columns) == ["a", "b"]
    # one barometer reading per row applies to every column of that row
    out = to_si(df, "barg", atmospheric_pressure=pd.Series([1e5]))
    np.testing.assert_array_equal(out.to_numpy(), [[2e5, 3e5]])


def test_input_is_not_modified():
    x = np.array([1.0, 2.0])
    to_si(x, "K")
    from_si(x, "K")
    np.testing.assert_array_equal(x, [1.0, 2.0])


@pytest.mark.parametrize(
    "text, quantity",
    [
        ("bar(a)", "pressure"),
        ("kPa g", "pressure"),
        ("MPa", "pressure"),
        ("T/H", "mass_flow"),
        ("t/hr", "mass_flow"),
        ("kg/sec", "mass_flow"),
        ("MWe", "power"),
        ("MWth", "heat_flow"),
        ("%", "fraction"),
        ("-", "dimensionless"),
        ("kJ/(kg K)", "specific_entropy"),
        ("MJ/kg", "specific_energy"),
        ("Hz", "frequency"),
        ("kg/m3", "density"),
        ("MWh", "energy"),
        ("hectopascal", "pressure"),  # through pint
        ("Btu/s", "power"),  # through pint
    ],
)
def test_logger_spellings(text, quantity):
    assert quantity_of(text) == quantity


def test_percent_is_a_fraction():
    assert to_si(42.0, "%") == pytest.approx(0.42, rel=1e-14)
    assert parse_unit("percent").is_percent


BAD_UNITS = [
    ("psi", {}, UnitError, "ambiguous.*psia.*psig"),
    ("xyz", {}, UnitError, "Unknown unit 'xyz'.*Write it as"),
    ("", {}, UnitError, "empty"),
    ("kg", {}, UnitError, r"Unknown unit 'kg'.*\[mass\]"),
    ("m/s", {}, UnitError, "no plant quantity"),
    ("barg", {}, UnitError, "site.atmospheric_pressure or site.barometer_tag"),
    ("inHg vac", {}, UnitError, "atmospheric pressure"),
    ("delta_degC", {"quantity": "temperature"}, UnitError, "temperature difference"),
    ("kW", {"quantity": "temperature"}, UnitError, "measures power, not temperature"),
    ("m3/h", {"quantity": "mass_flow"}, UnitError, "needs the density"),
    ("kW", {"density": 1000.0}, InputError, "only used for volume units"),
    ("m3/h", {"quantity": "volume_flow", "density": 1.0}, InputError, "volume_flow"),
    ("kW", {"quantity": "power_output"}, InputError, "'quantity' parameter"),
    ("barg", {"atmospheric_pressure": -5.0}, InputError, "positive"),
]


@pytest.mark.parametrize("unit, kwargs, error, match", BAD_UNITS)
def test_bad_units(unit, kwargs, error, match):
    with pytest.raises(error, match=match):
        to_si(1.0, unit, **kwargs)


def test_non_text_unit():
    with pytest.raises(UnitError, match="must be a text"):
        parse_unit(5)


def test_non_numeric_values():
    with pytest.raises(InputError, match="'values' parameter of to_si must be numeric"):
        to_si(["a", "b"], "kW")


ROUND_TRIP_UNITS = [
    "bar",
    "barg",
    "psig",
    "inHg vac",
    "degC",
    "degF",
    "K",
    "t/h",
    "klb/h",
    "m3/h",
    "MW",
    "kJ/kg",
    "Btu/lb",
    "kJ/kWh",
    "Btu/kWh",
    "%",
]


@settings(max_examples=60, deadline=None)
@given(
    unit=st.sampled_from(ROUND_TRIP_UNITS),
    x=st.floats(min_value=-1e6, max_value=1e6, allow_nan=False),
    atm=st.floats(min_value=5e4, max_value=1.1e5),
    difference=st.booleans(),
)
def test_round_trip(unit, x, atm, difference):
    kw = {"atmospheric_pressure": atm} if parse_unit(unit).gauge else {}
    back = from_si(to_si(x, unit, difference=difference, **kw), unit, difference=difference, **kw)
    # tolerance: a few ulps of the largest number involved (value, offset or 1.1e5 Pa)
    assert back == pytest.approx(x, abs=1e-9 * (abs(x) + 1e3))


def test_si_unit_and_glossary():
    assert si_unit("pressure") == "Pa"
    assert si_unit("heat_rate") == "J/J"
    assert set(QUANTITIES) >= {"pressure", "temperature", "mass_flow", "fraction", "speed"}
    with pytest.raises(InputError, match="must be one of"):
        si_unit("pressures")


def test_compatible():
    assert compatible("power", "heat_flow")
    assert compatible("volume_flow", "mass_flow")
    assert compatible("temperature", "temperature_difference")
    assert not compatible("temperature_difference", "temperature")
    assert not compatible("pressure", "temperature")


def test_parse_is_cached_and_spec_passes_through():
    a = parse_unit("t/h")
    assert parse_unit("t/h") is a
    assert parse_unit(a) is a
    assert isinstance(a, UnitSpec)


def test_negative_absolute_pressure_helpers():
    p = to_si(np.array([-1.2, 0.5, np.nan]), "barg", atmospheric_pressure=101325.0)
    np.testing.assert_array_equal(nonpositive_pressure(p), [True, False, False])
    with pytest.raises(DataError, match=r"run.csv, column 'PT-1': 1 value.*position 0"):
        check_absolute_pressure(p, where="run.csv, column 'PT-1'")
    check_absolute_pressure(p[1:], where="x")  # positive and NaN pass


@pytest.mark.parametrize("text", ["NAN", "nan", "inf", "-inf", "0"])
def test_a_number_that_is_no_unit_is_refused(text):
    """pint reads 'nan', 'inf' and '0' as bare numbers; as a unit they would turn every
    value into nan, inf or 0 without a word (found by the random-CSV property test: a
    units row of "NAN" masked a column's values with no exclusion record)."""
    with pytest.raises(UnitError, match="is not a unit"):
        parse_unit(text)


def test_a_nan_units_row_is_refused_not_read_as_nan(tmp_path):
    """A second line of "NAN" cells, taken for a units row, is refused with the line and
    column named; before, it turned every value of the column into nan silently."""
    from perftest import read_run

    path = tmp_path / "run.csv"
    path.write_text('time,A\n"2031-05-04 09:59:00","NAN"\n"2031-05-04 10:00:00","5"\n')
    with pytest.raises(UnitError, match=r"line 2, column 'A'.*'NAN' is not a unit"):
        read_run(path)
