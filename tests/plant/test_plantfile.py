"""Tests of perftest.plant.file: loading, validation messages and tag uncertainty."""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.stats import norm

from perftest.errors import InputError, PlantFileError
from perftest.plant.file import DEFAULT_STABILITY, KNOWN_SECTIONS, Plant, load_plant

DATA = Path(__file__).resolve().parents[1] / "data" / "plants"
FIXTURE = DATA / "brackwater.toml"

BASE = """\
[site]
name = "Test rig"
atmospheric_pressure = { value = 1.0, unit = "bar" }

[tags.TT-1]
quantity = "temperature"
unit = "degC"
"""


def write(tmp_path, text: str, name: str = "plant.toml") -> Path:
    path = tmp_path / name
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def line_of(text: str, needle: str) -> int:
    """1-based line of the first line containing ``needle`` (independent of the scanner)."""
    for i, line in enumerate(textwrap.dedent(text).splitlines(), start=1):
        if needle in line:
            return i
    raise AssertionError(f"{needle!r} not in text")


@pytest.fixture(scope="module")
def plant() -> Plant:
    return load_plant(FIXTURE)


# -- the fixture loads --------------------------------------------------------


def test_fixture_loads(plant):
    assert plant.name == "Brackwater Point CHP, unit 2"
    assert plant.site.timezone == "Europe/Berlin"
    assert plant.site.barometer_tag == "PT-001"
    assert plant.site.atmospheric_pressure is None
    # dead-state pressure defaults to one standard atmosphere, 101 325 Pa
    # (NIST SP 811 B.8, atmosphere, standard, exact)
    assert plant.site.dead_state_pressure == 101325.0
    assert plant.site.dead_state_temperature_tag == "TT-001"
    assert set(plant.tags) >= {"PT-101", "TT-101", "FT-101A", "FT-201", "JT-101"}
    assert plant.tags["PT-101"].column == "HP STEAM PRESS"
    assert plant.tags["TT-102"].column == "TT-102"  # defaults to the id
    assert plant.tags["XT-101"].quantity == "frequency"  # inferred from the unit
    assert plant.tags["FT-101A"].sentinels == (-9999, "Bad Input")
    # 998.2 kg/m3 written with its unit; kg/m3 is SI, so no change
    assert plant.tags["FT-201"].density == 998.2
    assert plant.groups["FT-101"].tags == ("FT-101A", "FT-101B")
    assert plant.groups["FT-101"].quantity == "mass_flow"
    assert plant.is_measured("FT-101") and plant.quantity_of("FT-101") == "mass_flow"
    assert plant.tags_without_uncertainty == ("XT-101",)
    assert plant.sections["streams"]["main_steam"]["fluid"] == "water"
    assert len(plant.sections["guarantees"]) == 2
    assert plant.sections["corrections"] == [] and plant.sections["fuel"] == {}


def test_stability_defaults_and_overrides(plant):
    # [stability.temperature] in the fixture overrides the default
    assert plant.stability["temperature"].value_si == 1.0
    assert plant.stability["pressure"] == DEFAULT_STABILITY["pressure"]
    # per-tag override: 0.5 % of the mean
    lim = plant.tags["PT-101"].stability
    assert lim.kind == "percent"
    # tolerance: float rounding of 0.5/100
    assert lim.limit_si(2e6) == pytest.approx(1e4, rel=1e-14)


# -- locating keys ------------------------------------------------------------


def test_locate_in_fixture(plant):
    text = FIXTURE.read_text()
    lines = text.splitlines()
    assert plant.locate("tags", "PT-101") == line_of(text, "[tags.PT-101]")
    assert plant.locate("tags", "PT-001") == line_of(text, '[tags."PT-001"]')
    n = plant.locate("tags", "PT-101", "span")
    assert lines[n - 1].startswith("span")
    n = plant.locate("tags", "TT-001", "uncertainty", "kind")
    assert "uncertainty" in lines[n - 1] and n > line_of(text, "[tags.TT-001]")
    # second [[guarantees]] entry
    n = plant.locate("guarantees", 1, "value")
    assert lines[n - 1] == "value = 10500"
    # dotted string form; unknown key falls back to its table
    assert plant.locate("tags.TT-101.unit") == plant.locate("tags", "TT-101", "unit")
    assert plant.locate("tags", "TT-101", "nothing") == line_of(text, "[tags.TT-101]")
    assert plant.locate("nothing") is None


def test_locate_tricky_toml(tmp_path):
    text = """\
    # a comment with key = value and [tags.X]
    [site]
    name = "A # not a comment [x]"
    atmospheric_pressure = { value = 1.0, unit = "bar" }

    [tags]
    "TT 1" = { quantity = "temperature", unit = "degC" }
    TT-2 = { unit = "degC", uncertainty = { value = 0.5, kind = "absolute" } }

    [tags.'TT-3']
    quantity = "temperature"
    unit = "degC"
    sentinels = [
        -9999,  # logger fill value
        "NaN",
    ]
    description = '''several
    lines'''
    calibration = [0.1, 1.0]
    """
    plant = load_plant(write(tmp_path, text))
    assert plant.locate("tags", "TT 1") == line_of(text, '"TT 1"')
    assert plant.locate("tags", "TT 1", "unit") == line_of(text, '"TT 1"')
    assert plant.locate("tags", "TT-2", "uncertainty", "kind") == line_of(text, "TT-2 =")
    assert plant.locate("tags", "TT-3") == line_of(text, "[tags.'TT-3']")
    assert plant.locate("tags", "TT-3", "sentinels", 1) == line_of(text, '"NaN"')
    assert plant.locate("tags", "TT-3", "calibration") == line_of(text, "calibration")
    assert plant.tags["TT 1"].unit == "degC"
    assert plant.tags["TT-3"].description == "several\nlines"


def test_error_helper_for_other_modules(plant):
    text = FIXTURE.read_text()
    err = plant.error("unknown fluid 'steam'. Use 'water'.", "streams", "main_steam", "fluid")
    assert isinstance(err, PlantFileError)
    line = line_of(text, 'fluid = "water"')
    assert str(err) == (
        f"brackwater.toml, line {line}, key 'streams.main_steam.fluid': "
        "unknown fluid 'steam'. Use 'water'."
    )
    assert err.line == line and err.key == "streams.main_steam.fluid"
    assert err.file == str(FIXTURE)
    err = plant.error("bad", "tags", "PT-101", "unit")
    assert err.tag == "PT-101"
    err = plant.error("bad", "guarantees", 1, "direction")
    assert "key 'guarantees[1].direction'" in str(err)


def test_read_quantity(plant):
    # 25 degC = 298.15 K (NIST SP 811 B.9); tolerance: float rounding
    assert plant.read_quantity({"value": 25, "unit": "degC"}, "temperature", "x") == (
        pytest.approx(298.15, abs=1e-12)
    )
    # bare number in the default unit: 12.5 MW
    assert plant.read_quantity(12.5, "power", "guarantees", 0, "value", default_unit="MW") == (
        1.25e7
    )
    with pytest.raises(PlantFileError, match=r"line \d+, key 'guarantees\[0\].value'.*unit"):
        plant.read_quantity(12.5, "power", "guarantees", 0, "value")
    with pytest.raises(PlantFileError, match="measures pressure, not power"):
        plant.read_quantity({"value": 1, "unit": "bar"}, "power", "performance")
    with pytest.raises(PlantFileError, match="unknown key 'units'"):
        plant.read_quantity({"value": 1, "units": "MW"}, "power", "performance")
    with pytest.raises(PlantFileError, match="finite number"):
        plant.read_quantity({"value": "1", "unit": "MW"}, "power", "performance")
    # the fixture has a barometer tag, no fixed atmosphere: a gauge value cannot be fixed
    with pytest.raises(PlantFileError, match="atmospheric"):
        plant.read_quantity({"value": 1, "unit": "barg"}, "pressure", "x")


# -- tag uncertainty ------------------------------------------------------------


def test_percent_of_span_at_95_percent(plant):
    tag = plant.tags["PT-101"]  # 0.075 % of a 0..100 bar span at 95 %
    u = tag.systematic_standard_uncertainty(50e5)
    # U = 0.075 bar = 7500 Pa; k for 95 % of a normal distribution is the 0.975 quantile,
    # 1.960 (JCGM 100:2008 Table G.1); scipy.stats.norm as reference.
    # tolerance: float rounding only
    assert u == pytest.approx(7500.0 / norm.ppf(0.975), rel=1e-12)
    assert tag.uncertainty.coverage_factor == pytest.approx(1.960, abs=5e-4)  # Table G.1


def test_explicit_k_and_standard_level(plant):
    # 1.5 K at k = 2 -> 0.75 K, whatever the temperature (absolute in degC = K interval)
    assert plant.tags["TT-101"].systematic_standard_uncertainty(800.0) == 0.75
    # "standard": the stated value is the standard uncertainty; 0.5 mbar = 50 Pa
    # (NIST SP 811 B.8: millibar = 1 E+02 Pa); tolerance: float rounding
    assert plant.tags["PT-001"].systematic_standard_uncertainty(1e5) == pytest.approx(
        50.0, rel=1e-14
    )


def test_percent_of_reading_mass_and_volume_flow(plant):
    k = norm.ppf(0.975)  # JCGM 100:2008 Table G.1 (95 %, normal)
    # 1 % of 100 kg/s (= 360 t/h) is 1 kg/s; tolerance: float rounding
    assert plant.tags["FT-101A"].systematic_standard_uncertainty(100.0) == pytest.approx(
        1.0 / k, rel=1e-12
    )
    # volume-flow meter converted with density: 0.5 % of the reading stays 0.5 %
    mean = np.array([500.0, 1000.0])
    u = plant.tags["FT-201"].systematic_standard_uncertainty(mean)
    np.testing.assert_allclose(u, 0.005 * mean / k, rtol=1e-12)


def test_percent_of_reading_gauge_uses_gauge_reading(tmp_path):
    text = (
        BASE
        + """
[tags.PT-2]
quantity = "pressure"
unit = "barg"
uncertainty = { value = 1.0, kind = "percent_of_reading", level = "standard" }
"""
    )
    plant = load_plant(write(tmp_path, text))
    tag = plant.tags["PT-2"]
    # 11 bar absolute at 1 bar atmosphere is a 10 barg reading; 1 % of it is 0.1 bar
    # (a gauge's accuracy applies to what it shows; common practice, no source)
    u = tag.systematic_standard_uncertainty(11e5, atmospheric_pressure=1e5)
    assert u == pytest.approx(1e4, rel=1e-12)  # tolerance: float rounding
    with pytest.raises(Exception, match="atmospheric"):
        tag.systematic_standard_uncertainty(11e5)


def test_absolute_degF_uncertainty_is_an_interval(tmp_path):
    text = (
        BASE
        + """
[tags.TT-2]
quantity = "temperature"
unit = "degF"
uncertainty = { value = 1.8, kind = "absolute", level = "standard" }
"""
    )
    tag = load_plant(write(tmp_path, text)).tags["TT-2"]
    # 1.8 degF interval = 1 K (NIST SP 811 B.9); tolerance: float rounding of 5/9
    assert tag.systematic_standard_uncertainty(300.0) == pytest.approx(1.0, rel=1e-14)


def test_no_uncertainty_is_zero_and_no_unit_asks_for_one(plant, tmp_path):
    assert plant.tags["XT-101"].systematic_standard_uncertainty(50.0) == 0.0
    text = BASE + '\n[tags.TT-3]\nquantity = "temperature"\n'
    text += 'uncertainty = { value = 0.2, kind = "absolute" }\n'
    tag = load_plant(write(tmp_path, text)).tags["TT-3"]
    with pytest.raises(InputError, match="has no unit.*unit="):
        tag.systematic_standard_uncertainty(300.0)
    # with the run file's unit
    assert tag.systematic_standard_uncertainty(300.0, unit="K") == pytest.approx(
        0.2 / norm.ppf(0.975), rel=1e-12
    )


def test_apply_calibration_matches_numpy_polyval(plant):
    tag = plant.tags["PT-101"]  # 0.02 + 0.999 x
    x = np.array([0.0, 10.0, 55.5])
    # numpy.polynomial.polynomial.polyval as reference (ascending coefficients)
    ref = np.polynomial.polynomial.polyval(x, tag.calibration)
    np.testing.assert_allclose(tag.apply_calibration(x), ref, rtol=1e-15)
    s = pd.Series(x, index=pd.Index(list("abc")), name="PT-101")
    out = tag.apply_calibration(s)
    assert isinstance(out, pd.Series) and list(out.index) == ["a", "b", "c"]
    same = plant.tags["TT-102"].apply_calibration(x)  # no calibration: equal copy
    np.testing.assert_array_equal(same, x)
    assert same is not x


def test_cubic_calibration(tmp_path):
    text = BASE.replace('unit = "degC"', 'unit = "degC"\ncalibration = [0.5, 1.01, -2e-4, 3e-7]')
    tag = load_plant(write(tmp_path, text)).tags["TT-1"]
    x = np.linspace(-20, 600, 7)
    ref = np.polynomial.polynomial.polyval(x, [0.5, 1.01, -2e-4, 3e-7])
    # tolerance: Horner vs numpy's own evaluation order, float rounding only
    np.testing.assert_allclose(tag.apply_calibration(x), ref, rtol=1e-13)


def test_duplicate_column_allowed_with_different_sources(tmp_path):
    text = (
        BASE
        + """
[tags.TT-A]
column = "TEMP"
source = "dcs"
quantity = "temperature"
unit = "degC"

[tags.TT-B]
column = "TEMP"
source = "portable_logger"
quantity = "temperature"
unit = "degC"
"""
    )
    plant = load_plant(write(tmp_path, text))
    assert plant.tags["TT-A"].column == plant.tags["TT-B"].column == "TEMP"


# -- bad files -----------------------------------------------------------------


def test_missing_file(tmp_path):
    with pytest.raises(PlantFileError, match="does not exist") as info:
        load_plant(tmp_path / "nope.toml")
    assert info.value.file.endswith("nope.toml")


def test_unreadable_file(tmp_path):
    # a link that points to itself cannot be opened (ELOOP); root may read any file,
    # so file permissions would not make a check that fails everywhere
    path = tmp_path / "plant.toml"
    try:
        path.symlink_to(path)
    except OSError:
        pytest.skip("symbolic links are not available here")
    with pytest.raises(PlantFileError, match="plant file cannot be read") as info:
        load_plant(path)
    assert info.value.file.endswith("plant.toml")


def test_not_toml(tmp_path):
    text = BASE + "\n[tags.TT-2]\nquantity = = 'temperature'\n"
    with pytest.raises(PlantFileError, match=r"plant.toml, line \d+, column \d+: not valid TOML"):
        load_plant(write(tmp_path, text))
    try:
        load_plant(write(tmp_path, text))
    except PlantFileError as exc:
        assert exc.line == line_of(text, "quantity = =")


def test_not_utf8(tmp_path):
    path = tmp_path / "plant.toml"
    path.write_bytes(b'[site]\nname = "caf\xe9"\n')
    with pytest.raises(PlantFileError, match="not UTF-8"):
        load_plant(path)


# (snippet appended to BASE, error match, text whose line the error must point at, key)
BAD = [
    (
        '[tags.TT-2]\nquantity = "temperature"\nunti = "degC"\n',
        r"unknown key 'unti' in tag 'TT-2'\. Did you mean 'unit'\?",
        "unti",
        "tags.TT-2.unti",
    ),
    (
        '[tags.TT-2]\nquantity = 5\nunit = "degC"\n',
        "must be a text. Got int 5",
        "quantity = 5",
        "tags.TT-2.quantity",
    ),
    (
        '[tags.TT-2]\nquantity = "temprature"\nunit = "degC"\n',
        "unknown quantity 'temprature'. Did you mean 'temperature'",
        "temprature",
        "tags.TT-2.quantity",
    ),
    (
        '[tags.TT-2]\nquantity = "temperature"\nunit = "bar"\n',
        "the unit 'bar' measures pressure, but the tag's quantity is temperature",
        'unit = "bar"',
        "tags.TT-2.unit",
    ),
    (
        '[tags.TT-2]\nquantity = "temperature"\nunit = "degQ"\n',
        "Unknown unit 'degQ'",
        'unit = "degQ"',
        "tags.TT-2.unit",
    ),
    (
        '[tags.TT-2]\nquantity = "temperature"\nunit = "degC"\n'
        'uncertainty = { value = 0.5, kind = "percent_of_span" }\n',
        "percent_of_span' needs the tag's span",
        "uncertainty =",
        "tags.TT-2.uncertainty.kind",
    ),
    (
        '[tags.TT-2]\nquantity = "temperature"\nunit = "degC"\n'
        'uncertainty = { value = 0.5, kind = "absolute", level = 95 }\n',
        "between 0 and 1.*Write 0.95, not 95",
        "uncertainty =",
        "tags.TT-2.uncertainty.level",
    ),
    (
        '[tags.TT-2]\nquantity = "temperature"\nunit = "degC"\nuncertainty = { value = 0.5 }\n',
        "'kind' is missing",
        "uncertainty =",
        "tags.TT-2.uncertainty",
    ),
    (
        '[tags.TT-2]\nquantity = "temperature"\nunit = "degC"\nspan = [100, 0]\n',
        "low must be below high",
        "span =",
        "tags.TT-2.span",
    ),
    (
        '[tags.FT-2]\nquantity = "mass_flow"\nunit = "m3/h"\n',
        "volume unit.*give the fluid density",
        'unit = "m3/h"',
        "tags.FT-2.unit",
    ),
    (
        '[tags.JT-2]\nquantity = "power"\nunit = "kW"\ndensity = 1000\n',
        "is not used: the unit 'kW' is no volume unit",
        "density =",
        "tags.JT-2.density",
    ),
    (
        '[tags.PT-2]\nquantity = "pressure"\nunit = "psi"\n',
        "ambiguous.*psia",
        'unit = "psi"',
        "tags.PT-2.unit",
    ),
    (
        '[tags.TT-2]\nunit = "degC"\ncolumn = "TT-1"\n',
        "column 'TT-1' is already read by tag 'TT-1'",
        'column = "TT-1"',
        "tags.TT-2.column",
    ),
    (
        '[tags.TT-2]\nunit = "degC"\ncalibration = [0.1, "x"]\n',
        "must be a finite number. Got a text",
        "calibration =",
        "tags.TT-2.calibration[1]",
    ),
    (
        '[tags.TT-2]\nunit = "degC"\nstability = { value = 0.2, kind = "relative" }\n',
        "kind must be 'percent' or 'absolute'",
        "stability =",
        "tags.TT-2.stability.kind",
    ),
    (
        '[tags.TT-2]\ndescription = "no unit"\n',
        "needs a 'quantity'",
        "[tags.TT-2]",
        "tags.TT-2",
    ),
    (
        '[groups.G-1]\ntags = ["TT-1", "TT-9"]\n',
        "names 'TT-9', which is not in \\[tags\\]",
        "tags = [",
        "groups.G-1.tags[1]",
    ),
    (
        '[tags.JT-2]\nunit = "MW"\n[groups.G-1]\ntags = ["TT-1", "JT-2"]\n',
        "tag 'JT-2' measures power, but 'TT-1' measures temperature",
        'tags = ["TT-1"',
        "groups.G-1.tags[1]",
    ),
    (
        '[groups.G-1]\ntags = ["TT-1"]\n',
        "at least two tag ids",
        'tags = ["TT-1"]',
        "groups.G-1.tags",
    ),
    (
        '[groups.TT-1]\ntags = ["TT-1", "TT-1"]\n',
        "also a tag id",
        "[groups.TT-1]",
        "groups.TT-1",
    ),
    (
        "[stability.temprature]\nvalue = 1.0\n",
        "unknown quantity 'temprature'",
        "[stability.temprature]",
        "stability.temprature",
    ),
    (
        '[stability.temperature]\nvalue = 1.0\nkind = "absolute"\n',
        "absolute limit needs its unit",
        "[stability.temperature]",
        "stability.temperature",
    ),
    (
        "[tag.TT-2]\nunit = 'degC'\n",
        "unknown top-level table 'tag'. Did you mean 'tags'\\?.*Known tables: site, tags",
        "[tag.TT-2]",
        "tag",
    ),
    (
        "guarantees = 5\n",
        "must be an array of tables",
        "guarantees = 5",
        "guarantees",
    ),
]


@pytest.mark.parametrize("snippet, match, at, key", BAD)
def test_bad_plant_files(tmp_path, snippet, match, at, key):
    # top-level `key = value` lines must come before the first table
    text = snippet + "\n" + BASE if not snippet.startswith("[") else BASE + "\n" + snippet
    with pytest.raises(PlantFileError, match=match) as info:
        load_plant(write(tmp_path, text))
    err = info.value
    # the line of `at` inside the snippet, counted in the whole file
    first = 1 if not snippet.startswith("[") else len(BASE.splitlines()) + 2
    assert err.line == first - 1 + line_of(snippet, at)
    assert err.key == key
    assert str(err).startswith(f"plant.toml, line {err.line}, key '{key}': ")


SITE_BAD = [
    ('timezone = "Mars/Olympus"', "unknown time zone 'Mars/Olympus'", "site.timezone"),
    (
        'barometer_tag = "TT-1"',
        "give either 'atmospheric_pressure' or 'barometer_tag'",
        "site.barometer_tag",
    ),
    ("colour = 1", "unknown key 'colour' in \\[site\\]", "site.colour"),
    (
        "dead_state_temperature = 25",
        "must be a temperature with its unit",
        "site.dead_state_temperature",
    ),
    (
        'dead_state_temperature_tag = "XX-9"',
        "names tag 'XX-9', which is not in \\[tags\\]",
        "site.dead_state_temperature_tag",
    ),
]


@pytest.mark.parametrize("line, match, key", SITE_BAD)
def test_bad_site(tmp_path, line, match, key):
    text = BASE.replace('name = "Test rig"', f'name = "Test rig"\n{line}')
    with pytest.raises(PlantFileError, match=match) as info:
        load_plant(write(tmp_path, text))
    assert info.value.key == key
    assert info.value.line == line_of(text, line.split("=")[0].strip() + " =")


def test_implausible_atmosphere(tmp_path):
    # 1.013 written with unit kPa instead of bar: 1013 Pa is no atmosphere on earth
    text = BASE.replace('value = 1.0, unit = "bar"', 'value = 1.013, unit = "kPa"')
    with pytest.raises(PlantFileError, match="not plausible"):
        load_plant(write(tmp_path, text))


def test_gauge_tag_needs_atmospheric_reference(tmp_path):
    text = """\
    [site]
    name = "Test rig"

    [tags.PT-1]
    quantity = "pressure"
    unit = "barg"
    """
    with pytest.raises(
        PlantFileError, match="site.atmospheric_pressure.*or site.barometer_tag"
    ) as info:
        load_plant(write(tmp_path, text))
    assert info.value.key == "tags.PT-1.unit" and info.value.line == line_of(text, "barg")


def test_barometer_must_be_absolute_pressure(tmp_path):
    text = """\
    [site]
    barometer_tag = "PT-0"

    [tags.PT-0]
    unit = "mbarg"
    """
    with pytest.raises(PlantFileError, match="must be absolute"):
        load_plant(write(tmp_path, text))


def test_known_sections_listed():
    assert KNOWN_SECTIONS[:4] == ("site", "tags", "groups", "stability")


def _paths(value, prefix=()):
    """Every key path of a parsed TOML document (arrays indexed)."""
    if isinstance(value, dict):
        for k, v in value.items():
            yield prefix + (k,)
            yield from _paths(v, prefix + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            yield prefix + (i,)
            yield from _paths(v, prefix + (i,))


SCAN_TEXT = r'''
top.dotted.key = 1   # dotted keys at top level
"quoted.key" = 'C:\path\'
ml = """a "quoted" \""" b"""
arr = [ { x = 1 }, { x = 2, y = [1, 2] } ]
[table]
a = 1
sub.b = "x]"
[[items]]
v = 1
[[items]]
v = 2
[items.extra]
w = 3
'''


@pytest.mark.parametrize("text", [SCAN_TEXT, FIXTURE.read_text()])
def test_scanner_finds_every_key_tomllib_finds(text):
    import tomllib

    from perftest.plant.scanner import scan_lines as _scan_lines

    lines = _scan_lines(text)
    data = tomllib.loads(text)
    missing = [p for p in _paths(data) if p not in lines]
    assert missing == []
    # spot checks against the text itself
    if text is SCAN_TEXT:
        # line_of counts the leading empty line of the text, as the scanner does
        assert lines[("items", 1, "v")] == line_of(text, "v = 2")
        assert lines[("items", 1, "extra", "w")] == line_of(text, "w = 3")
        assert lines[("arr", 1, "y", 1)] == line_of(text, "arr =")


# --------------------------------------------------------------------------- the schema

DOCS = Path(__file__).resolve().parents[2] / "docs" / "plant-file.md"

# One plant per kind with every key the schema gives that kind: each must load.
# References are plain texts here; what they name is checked when results are computed.
KIND_KEYS = {
    "power": dict(gross_power='"JT-1"', auxiliary_power='["JT-2", "JT-3"]', heat_input='"fuel"',
                  basis='"HHV"', source_temperature='"TT-1"', sink_temperature='"TT-2"',
                  cycle_heat='"boiler.heat"', flue_gas_o2='"AT-O2"',
                  flue_gas_oxygen_basis='"wet"', radiation_loss="0.005"),
    "chp": dict(gross_power='"JT-1"', heat_input='"fuel"', source_temperature='"TT-1"',
                sink_temperature='"TT-2"', heat_export='["hot_out"]', heat_return='"back"',
                makeup='"makeup"', flue_gas_temperature='"TT-FG"'),
    "refrigeration": dict(power_input='"JT-1"', cooling='"chiller.heat"',
                          cold_temperature='"TT-1"', hot_temperature='"TT-2"',
                          heat_rejected='"condenser.heat"'),
    "heat_pump": dict(power_input='"JT-1"', heating='"hp.heat"', cold_temperature='"TT-1"',
                      hot_temperature='"TT-2"'),
    "boiler": dict(useful_heat='"boiler.heat"', basis='"lhv"', flue_gas_o2='"AT-O2"',
                   flue_gas_co2='{ value = 9.5, unit = "%" }', flue_gas_oxygen_basis='"dry"',
                   flue_gas_co='"AT-CO"', flue_gas_temperature='"TT-FG"',
                   air_temperature='"TT-AIR"', air_relative_humidity='"RH-AIR"',
                   radiation_loss='{ value = 0.4, kind = "percent" }',
                   other_losses='{ value = 0.2, unit = "MW" }'),
}  # fmt: skip


def _performance(kind: str, keys: dict) -> str:
    body = "".join(f"{k} = {v}\n" for k, v in keys.items())
    return BASE + f'\n[performance]\nkind = "{kind}"\n' + body


@pytest.mark.parametrize("kind", sorted(KIND_KEYS))
def test_every_kind_loads_with_its_keys(tmp_path, kind):
    plant = load_plant(write(tmp_path, _performance(kind, KIND_KEYS[kind])))
    assert set(plant.sections["performance"]) == {"kind", *KIND_KEYS[kind]}


@pytest.mark.parametrize(
    "kind, key, owners",
    [
        ("power", "cooling", "refrigeration"),
        ("refrigeration", "gross_power", "power, chp"),
        ("heat_pump", "heat_rejected", "refrigeration"),
        ("boiler", "sink_temperature", "power, chp"),
        ("chp", "useful_heat", "boiler"),
        ("refrigeration", "flue_gas_o2", "power, chp, boiler"),
    ],
)
def test_key_of_another_kind_names_where_it_belongs(tmp_path, kind, key, owners):
    keys = dict(KIND_KEYS[kind], **{key: '"X-1"'})
    text = _performance(kind, keys)
    with pytest.raises(PlantFileError) as info:
        load_plant(write(tmp_path, text))
    assert str(info.value).startswith(
        f"plant.toml, line {line_of(text, f'{key} = ')}, key 'performance.{key}': "
        f"'{key}' is not a key of kind = \"{kind}\"; it belongs to {owners}."
    )
    assert info.value.key == f"performance.{key}"


def test_default_kind_is_power(tmp_path):
    text = BASE + '\n[performance]\ngross_power = "JT-1"\nheating = "hp.heat"\n'
    with pytest.raises(PlantFileError, match=r"'heating' is not a key of kind = \"power\""):
        load_plant(write(tmp_path, text))


def test_misspelt_key_is_refused_with_a_suggestion(tmp_path):
    text = _performance("power", dict(gross_power='"JT-1"', auxiliary_pwer='"JT-2"'))
    with pytest.raises(PlantFileError) as info:
        load_plant(write(tmp_path, text))
    err = info.value
    assert err.line == line_of(text, "auxiliary_pwer")
    assert Path(err.file).name == "plant.toml"
    assert "unknown key 'auxiliary_pwer' in [performance]. Did you mean 'auxiliary_power'?" in (
        str(err)
    )
    # the known keys listed are those of the kind, not of every kind
    assert "cooling" not in str(err) and "sink_temperature" in str(err)


@pytest.mark.parametrize(
    "snippet, key, fragment",
    [
        ('[fuel]\nmass_flow = "FT-1"\nlhv = { value = 50, unit = "MJ/kg", u = 1 }\n',
         "fuel.lhv.u", "unknown key 'u' in a value with its unit"),
        ('[fuel]\nmass_flow = "FT-1"\ncomposition = { methane = "lots" }\n',
         "fuel.composition.methane", "must be a number. Got a text"),
        ('[[corrections]]\nresult = "net_power"\nvariable = "TT-1"\nreference = 15\n'
         'surface = { x = [1, 2], y = [1, 2], values = [[1, 1], [1, 1]], z_unit = "K" }\n',
         "corrections[0].surface.z_unit", "Did you mean 'y_unit'"),
        ('[[corrections]]\nresult = "net_power"\nvariable = "TT-1"\nreference = 15\n'
         "curve = { x = [1, 2], y = [1, \"one\"] }\n",
         "corrections[0].curve.y[1]", "must be a finite number. Got a text"),
        ('[[guarantees]]\nquantity = "corrected_net_power"\nvalue = 1\ndirection = "at_least"\n'
         "margin = 1\n", "guarantees[0].margin", "unknown key 'margin'"),
        ('[acceptance]\nrules = "plain"\n', "acceptance.rules", "Did you mean 'rule'"),
        ('[design]\nduraton = "2h"\n', "design.duraton", "Did you mean 'duration'"),
        ('[design.tags]\nTT-1 = { value = 1, scater = 0.1 }\n', "design.tags.TT-1.scater",
         "unknown key 'scater' in design tag 'TT-1'. Did you mean 'scatter'"),
        ('[streams.s]\nfluid = "water"\nmass_flw = "FT-1"\n', "streams.s.mass_flw",
         "unknown key 'mass_flw' in stream 's'. Did you mean 'mass_flow'"),
        ('[units.t]\ntype = "turbine"\nshaft = "g"\n', "units.t.shaft",
         "'shaft' is not a key of type = \"turbine\"; it belongs to generator"),
        ('[units.t]\ntype = "no_such_type"\noutlet = "s"\n', "units.t.outlet",
         "Did you mean 'outlets'"),
        ('[reference]\ntemperature = 15\n', "reference.temperature", "takes no keys"),
    ],
)  # fmt: skip
def test_unknown_keys_in_every_section(tmp_path, snippet, key, fragment):
    text = BASE + "\n" + snippet
    with pytest.raises(PlantFileError) as info:
        load_plant(write(tmp_path, text))
    assert info.value.key == key
    assert fragment in str(info.value)
    assert info.value.line is not None


def test_basis_is_read_without_regard_to_case(tmp_path):
    # evaluate() reads the basis with .lower(); the schema must not refuse what it reads
    text = _performance("power", dict(gross_power='"JT-1"', basis='"LHV"'))
    assert load_plant(write(tmp_path, text)).sections["performance"]["basis"] == "LHV"


CORRECTION = """
[[corrections]]
result = "net_power"
variable = "TT-1"
reference = { value = 15.0, unit = "degC" }
kind = "KIND"
polynomial = [0.0, 0.001]
"""


def test_correction_given_twice_is_refused_naming_both_lines(tmp_path):
    text = BASE + CORRECTION.replace("KIND", "multiplicative") * 2
    with pytest.raises(PlantFileError) as info:
        load_plant(write(tmp_path, text))
    lines = [i for i, s in enumerate(text.splitlines(), start=1) if s == 'variable = "TT-1"']
    assert info.value.line == lines[1]
    assert info.value.key == "corrections[1].variable"
    assert f"corrections[0] at line {lines[0]} already does" in str(info.value)


def test_surface_sharing_a_variable_with_a_curve_is_refused(tmp_path):
    surface = (
        '\n[[corrections]]\nresult = "net_power"\nvariable = "RH-1"\nreference = 0.6\n'
        'second_variable = "TT-1"\nsecond_reference = 15\n'
        "surface = { x = [0, 1], y = [0, 30], values = [[1, 1], [1, 1]] }\n"
    )
    text = BASE + CORRECTION.replace("KIND", "multiplicative") + surface
    with pytest.raises(PlantFileError, match=r"corrections\[1\]\.second_variable.*'TT-1'"):
        load_plant(write(tmp_path, text))


def test_additive_and_multiplicative_of_one_variable_are_two_terms(tmp_path):
    # measured = prod f_i * R + sum g_j: one term of each form is allowed
    text = BASE + CORRECTION.replace("KIND", "multiplicative")
    text += CORRECTION.replace("KIND", "additive")
    assert len(load_plant(write(tmp_path, text)).sections["corrections"]) == 2


def test_docs_key_tables_are_rendered_from_the_schema():
    from perftest.plant.keydocs import marked_tables, render_docs
    from perftest.plant.schema import KEY_TABLES

    text = DOCS.read_text(encoding="utf-8")
    assert sorted(marked_tables(text)) == sorted(KEY_TABLES)
    # fails when a key is added to the schema but not to the page, or the reverse:
    # regenerate with `python -m perftest.plant.keydocs docs/plant-file.md`
    assert render_docs(text) == text


def test_docs_check_can_fail():
    from perftest.plant.keydocs import render_docs

    text = DOCS.read_text(encoding="utf-8")
    row = next(s for s in text.splitlines() if s.startswith("| `auxiliary_power` |"))
    stale = text.replace(row + "\n", "", 1)
    assert render_docs(stale) != stale
    assert render_docs(stale) == text


def test_schema_unit_and_stream_keys_are_those_of_the_model():
    # the model (perftest.plant.spec) reads streams and units; the schema must name
    # exactly the keys it reads, per unit type
    from perftest.plant import spec
    from perftest.plant.schema import STREAM, UNIT

    assert {k.name for k in STREAM.keys} == set(spec._STREAM_KEYS)
    for utype in spec.UNIT_TYPES:
        rule = spec._UNIT_TABLE[utype]
        model = {"type", "description", *rule["ports"], *rule["variables"], *rule.get("extra", ())}
        schema = {k.name for k in UNIT.keys if not k.only or utype in k.only}
        assert schema == model, utype


@pytest.mark.parametrize(
    "text",
    [
        'name = "' + "[" * 100 + '"\n',  # brackets inside a string
        "# " + "." * 100 + "\n",  # dots in a comment
        "x = [" + ", ".join(["1.5"] * 200) + "]\n",  # many floats on one line
        'x = """\n' + "{" * 100 + '\n"""\n',  # a multi-line string
        "a.b.c = { d.e = [[1.5, 2.5], [3.5]] }\n",
    ],
)
def test_nesting_check_ignores_strings_comments_and_numbers(text):
    import tomllib

    from perftest.plant.scanner import nesting_problem

    tomllib.loads(text)  # the cases are valid TOML
    assert nesting_problem(text) is None


@pytest.mark.parametrize(
    "text, line",
    [
        ("a = 1\nb = " + "[" * 33 + "]" * 33 + "\n", 2),
        ("a = 1\n\n" + ".".join(["k"] * 33) + " = 1\n", 3),
        ("a = 1\nb = " + "{c = " * 33 + "1" + "}" * 33 + "\n", 2),
    ],
)
def test_nesting_check_finds_the_line(text, line):
    from perftest.plant.scanner import nesting_problem

    assert nesting_problem(text)[0] == line
    # one level less is accepted
    for deep, less in (("[", "["), ("]", "]"), ("{c = ", "{c = "), ("}", "}")):
        text = text.replace(deep * 33, less * 32)
    text = text.replace(".".join(["k"] * 33), ".".join(["k"] * 32))
    assert nesting_problem(text) is None
