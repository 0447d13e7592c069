"""Truth table of malformed plant files.

Each row changes one thing in the demo plant file (sample_data/brackenfold/plant.toml)
and states the error class and message fragment that loading it (``load_plant``) and
building its model (``build_model``) must give.  The fragment names the TOML key or
the line, so the engineer can go straight to the mistake.  tests/test_plantfile.py
checks the [site], [tags] and [groups] messages line by line on a tiny file; this
table covers the sections of a whole plant (streams, units, fuel, performance,
corrections, guarantees), the file as bytes, and values that look like code.
"""

from __future__ import annotations

import pytest

from perftest.errors import PerftestError, PlantFileError
from perftest.evaluation.corrections import curves_from_plant, guarantees_from_plant
from perftest.evaluation.results import _fuel_basis, _performance_table
from perftest.plant import build_model
from perftest.plant.file import load_plant

from .conftest import DEMO, PLANT

DEMO_TEXT = (DEMO / "plant.toml").read_text(encoding="utf-8")


def load_and_build(path):
    """Everything that reads the plant file before any run data is needed."""
    plant = load_plant(path)
    if plant.sections.get("streams"):
        build_model(plant)
    curves_from_plant(plant)
    guarantees_from_plant(plant)
    if plant.sections.get("fuel"):
        # the reader of [fuel] that evaluate() uses (private: no public reader yet)
        _fuel_basis(plant, _performance_table(plant))
    return plant


def mutate(old: str, new: str, text: str = DEMO_TEXT) -> str:
    # the demo file is generated; a failed replacement must not pass silently
    assert old in text, f"{old!r} is not in the demo plant file any more"
    return text.replace(old, new, 1)


_SINK = 'sink_temperature = "cw_in.temperature"\n'
_FLUE = (
    'flue_gas_o2 = { value = 3.0, unit = "%" }\n'
    'flue_gas_temperature = { value = 130, unit = "degC" }\n'
    'air_temperature = { value = 15, unit = "degC" }\n'
)

# (old text, new text, error class, fragment)
MUTATIONS = [
    # --- the firing side of the boiler ([performance] flue-gas keys)
    pytest.param(
        _SINK,
        _SINK + _FLUE.replace('{ value = 3.0, unit = "%" }', '"AT-9"'),
        PlantFileError,
        r"performance\.flue_gas_o2.*'AT-9' is neither a tag",
        id="flue-gas-unknown-tag",
    ),
    pytest.param(
        _SINK,
        _SINK + _FLUE.replace('air_temperature = { value = 15, unit = "degC" }\n', ""),
        PlantFileError,
        r"needs 'air_temperature'",
        id="flue-gas-without-air-temperature",
    ),
    pytest.param(
        _SINK,
        _SINK + _FLUE + 'radiation_loss = "0.5 %"\n',
        PlantFileError,
        r"performance\.radiation_loss",
        id="flue-gas-loss-as-text",
    ),
    pytest.param(
        _SINK,
        _SINK + _FLUE + 'radiation_loss = { value = -0.2, kind = "percent" }\n',
        PlantFileError,
        r"performance\.radiation_loss.*>= 0",
        id="flue-gas-negative-loss",
    ),
    # --- streams
    pytest.param(
        '[streams.main_steam]\nfluid = "water"',
        '[streams.main_steam]\nfluid = "lava"',
        PlantFileError,
        r"streams\.main_steam\.fluid.*lava",
        id="unknown-fluid",
    ),
    pytest.param(
        '[streams.main_steam]\nfluid = "water"\nphase = "vapour"',
        '[streams.main_steam]\nfluid = "water"\nphase = "plasma"',
        PlantFileError,
        r"streams\.main_steam\.phase.*plasma",
        id="unknown-phase",
    ),
    pytest.param(
        'mass_flow = "FT-101"\npressure = "PT-101"',
        'mass_flow = "FT-999"\npressure = "PT-101"',
        PlantFileError,
        r"streams\.main_steam\.mass_flow.*FT-999",
        id="stream-names-unknown-tag",
    ),
    pytest.param(
        'mass_flow = "FT-101"\npressure = "PT-101"',
        'mass_flow = "PT-121"\npressure = "PT-101"',
        PlantFileError,
        r"streams\.main_steam\.mass_flow.*PT-121",
        id="stream-flow-is-a-pressure-tag",
    ),
    pytest.param(
        'pressure = { value = 2.5, unit = "bar" }',
        'pressure = { value = 2.5, unit = "kg/s" }',
        PlantFileError,
        r"streams\.cw_in\.pressure",
        id="fixed-pressure-wrong-unit",
    ),
    pytest.param(
        'pressure = { value = 2.5, unit = "bar" }',
        'pressure = { value = "2.5", unit = "bar" }',
        PlantFileError,
        r"streams\.cw_in\.pressure",
        id="fixed-value-is-text",
    ),
    pytest.param(
        'pressure = { value = 2.5, unit = "bar" }',
        "pressure = nan",
        PlantFileError,
        r"streams\.cw_in\.pressure",
        id="fixed-value-nan",
    ),
    pytest.param(
        '[streams.cw_in]\nfluid = "water"',
        '[streams.cw_in]\nfluid = "water"\ncolour = "blue"',
        PlantFileError,
        r"streams\.cw_in.*colour",
        id="unknown-stream-key",
    ),
    # --- units
    pytest.param(
        'type = "boiler"',
        'type = "time_machine"',
        PlantFileError,
        r"units\.boiler\.type.*time_machine",
        id="unknown-unit-type",
    ),
    pytest.param(
        'inlets = ["feedwater"]',
        'inlets = ["feed_water"]',
        PlantFileError,
        r"units\.boiler\.inlets.*feed_water",
        id="inlet-names-unknown-stream",
    ),
    pytest.param(
        'inlets = ["feedwater"]\noutlets = ["main_steam"]',
        'inlets = ["feedwater"]\noutlets = []',
        PlantFileError,
        r"units\.boiler\.outlets",
        id="unit-without-outlet",
    ),
    pytest.param(
        'inlets = ["condensate"]\noutlets = ["pump_discharge"]',
        'inlets = ["condensate"]\noutlets = ["feedwater"]',
        PlantFileError,
        r"feedwater",
        id="stream-leaves-two-units",
    ),
    pytest.param(
        'shaft = "turbine"',
        'shaft = "windmill"',
        PlantFileError,
        r"units\.generator\.shaft.*windmill",
        id="shaft-names-unknown-unit",
    ),
    pytest.param(
        'losses = { value = 1.6, kind = "percent" }',
        'losses = { value = 1.6, kind = "guess" }',
        PlantFileError,
        r"units\.generator\.losses",
        id="losses-unknown-kind",
    ),
    # --- tags
    pytest.param(
        'uncertainty = { value = 1.5, kind = "absolute", level = 0.95 }',
        'uncertainty = { value = "1+1", kind = "absolute", level = 0.95 }',
        PlantFileError,
        r"tags\.TT-101\.uncertainty\.value.*finite number",
        id="uncertainty-expression-text",
    ),
    pytest.param(
        'uncertainty = { value = 1.5, kind = "absolute", level = 0.95 }',
        'uncertainty = { value = -1.5, kind = "absolute", level = 0.95 }',
        PlantFileError,
        r"tags\.TT-101\.uncertainty",
        id="uncertainty-negative",
    ),
    pytest.param(
        'uncertainty = { value = 1.5, kind = "absolute", level = 0.95 }',
        'uncertainty = { value = 1.5, kind = "absolute", level = 1.5 }',
        PlantFileError,
        r"tags\.TT-101\.uncertainty\.level",
        id="coverage-level-above-one",
    ),
    pytest.param(
        'uncertainty = { value = 1.5, kind = "absolute", level = 0.95 }',
        'uncertainty = { value = inf, kind = "absolute", level = 0.95 }',
        PlantFileError,
        r"tags\.TT-101\.uncertainty\.value.*finite",
        id="uncertainty-infinite",
    ),
    pytest.param(
        'uncertainty = { value = 0.25, kind = "percent_of_span", level = 0.95 }\n'
        "span = [0.0, 160.0]",
        'uncertainty = { value = 0.25, kind = "percent_of_span", level = 0.95 }',
        PlantFileError,
        r"tags\.PT-101.*span",
        id="percent-of-span-without-span",
    ),
    pytest.param(
        "span = [0.0, 160.0]",
        "span = [160.0, 0.0]",
        PlantFileError,
        r"tags\.PT-101\.span",
        id="span-reversed",
    ),
    pytest.param(
        'description = "Main steam temperature"\nunit = "degC"',
        'description = "Main steam temperature"\nunit = "degC + 1"',
        PlantFileError,
        r"tags\.TT-101\.unit",
        id="unit-with-expression",
    ),
    pytest.param(
        'description = "Main steam temperature"\nunit = "degC"',
        'description = "Main steam temperature"\nunit = 5',
        PlantFileError,
        r"tags\.TT-101\.unit",
        id="unit-is-a-number",
    ),
    pytest.param(
        "sentinels = [-9999]",
        "sentinels = { value = -9999 }",
        PlantFileError,
        r"tags\.FT-161\.sentinels",
        id="sentinels-a-table",
    ),
    pytest.param(
        'shared_calibration = "cw-rtd-lot-2026"',
        "shared_calibration = 2026",
        PlantFileError,
        r"tags\.TT-181\.shared_calibration",
        id="shared-calibration-number",
    ),
    # --- site
    pytest.param(
        'timezone = "UTC"',
        'timezone = "Atlantis/Capital"',
        PlantFileError,
        r"site\.timezone.*Atlantis/Capital",
        id="unknown-time-zone",
    ),
    pytest.param(
        'barometer_tag = "PT-190"',
        'barometer_tag = "PT-999"',
        PlantFileError,
        r"site\.barometer_tag.*PT-999",
        id="barometer-unknown-tag",
    ),
    # --- fuel, performance, corrections, guarantees (checked when loaded)
    pytest.param(
        "composition = { methane = 0.925,",
        "composition = { unobtainium = 0.5, methane = 0.425,",
        PlantFileError,
        r"key 'fuel\.composition'.*unobtainium",
        id="fuel-unknown-component",
    ),
    pytest.param(
        'direction = "at_least"',
        'direction = "roughly"',
        PlantFileError,
        r"guarantees\[0\]\.direction.*roughly",
        id="guarantee-direction",
    ),
    pytest.param(
        'value = 33.0\nunit = "MW"',
        'value = 33.0\nunit = "furlong"',
        PlantFileError,
        r"guarantees\[0\]\.unit|guarantees\[0\]\.value",
        id="guarantee-unknown-unit",
    ),
    pytest.param(
        'value = 33.0\nunit = "MW"',
        'value = "33 MW"\nunit = "MW"',
        PlantFileError,
        r"guarantees\[0\]\.value",
        id="guarantee-value-text",
    ),
    pytest.param(
        "curve = { x = [5.0, 10.0, 15.0, 20.0, 25.0, 30.0], y = [1.012,",
        "curve = { x = [5.0, 10.0, 10.0, 20.0, 25.0, 30.0], y = [1.012,",
        PlantFileError,
        r"key 'corrections\[0\]'.*'x' must be strictly increasing",
        id="correction-curve-x-not-increasing",
    ),
    pytest.param(
        "y = [1.012, 1.007, 1.0, 0.991, 0.98, 0.966]",
        "y = [1.012, 1.007, 1.0, 0.991, 0.98]",
        PlantFileError,
        r"key 'corrections\[0\]'.*same length",
        id="correction-curve-lengths-differ",
    ),
    pytest.param(
        'kind = "multiplicative"',
        'kind = "magic"',
        PlantFileError,
        r"line \d+, key 'corrections\[0\]\.kind'.*'magic'",
        id="correction-kind",
    ),
    # --- keys against the schema (perftest.plant.schema): before, these were ignored
    pytest.param(
        'auxiliary_power = "JT-102"',
        'auxiliary_pwer = "JT-102"',
        PlantFileError,
        r"line \d+, key 'performance\.auxiliary_pwer': unknown key 'auxiliary_pwer' in "
        r"\[performance\]\. Did you mean 'auxiliary_power'\?",
        id="performance-misspelt-key",
    ),
    pytest.param(
        'auxiliary_power = "JT-102"',
        'auxiliary_power = "JT-102"\ncooling = "JT-102"',
        PlantFileError,
        r"key 'performance\.cooling': 'cooling' is not a key of kind = \"power\"; it belongs "
        r"to refrigeration",
        id="performance-key-of-another-kind",
    ),
    pytest.param(
        'auxiliary_power = "JT-102"',
        'auxiliary_power = "JT-102"\nkind = "steam"',
        PlantFileError,
        r"key 'performance\.kind': 'kind' must be one of 'power', 'chp', 'refrigeration'",
        id="performance-unknown-kind",
    ),
    pytest.param(
        'auxiliary_power = "JT-102"',
        "auxiliary_power = 0",
        PlantFileError,
        r"key 'performance\.auxiliary_power': must be a text or an array\. Got int 0",
        id="performance-number-for-a-reference",
    ),
    pytest.param(
        "combustion_reference_temperature = {",
        "combustion_temperature = {",
        PlantFileError,
        r"key 'fuel\.combustion_temperature'.*Did you mean 'combustion_reference_temperature'",
        id="fuel-misspelt-key",
    ),
    pytest.param(
        'uncertainty = { value = 0.3, kind = "percent", level = 0.95 }',
        'uncertainty = { value = 0.3, kind = "percent", levl = 0.95 }',
        PlantFileError,
        r"key 'fuel\.uncertainty\.levl'.*Did you mean 'level'",
        id="fuel-uncertainty-misspelt-key",
    ),
    pytest.param(
        'mass_flow = "FT-201"',
        'mass_flow = "FT-201"\nexergy_ratio = "1.04"',
        PlantFileError,
        r"key 'fuel\.exergy_ratio': must be a number\. Got a text",
        id="fuel-text-for-a-number",
    ),
    pytest.param(
        'result = "net_power"\nvariable = "cw_in.temperature"\nreference = { value = 15.0, '
        'unit = "degC" }\nkind = "multiplicative"',
        'result = "net_power"\nvariable = "cw_in.temperature"\nreference = { value = 15.0, '
        'unit = "degC" }\nknid = "multiplicative"',
        PlantFileError,
        r"key 'corrections\[0\]\.knid'.*\(corrections\[0\]\)\. Did you mean 'kind'",
        id="correction-misspelt-key",
    ),
    pytest.param(
        '0.98, 0.966], x_unit = "degC" }',
        '0.98, 0.966], x_units = "degC" }',
        PlantFileError,
        r"key 'corrections\[0\]\.curve\.x_units'.*Did you mean 'x_unit'",
        id="correction-curve-misspelt-key",
    ),
    pytest.param(
        "# ---- contract guarantees",
        '[[corrections]]\nresult = "net_power"\nvariable = "cw_in.temperature"\n'
        'reference = { value = 15.0, unit = "degC" }\npolynomial = [1.0, -0.002]\n\n'
        "# ---- contract guarantees",
        PlantFileError,
        r"key 'corrections\[2\]\.variable': corrects 'net_power' for 'cw_in\.temperature' a "
        r"second time \(multiplicative\): corrections\[0\] at line \d+ already does",
        id="correction-given-twice",
    ),
    pytest.param(
        "[acceptance]",
        '[reference]\nambient_temperature = { value = 15.0, unit = "degC" }\n\n[acceptance]',
        PlantFileError,
        r"key 'reference\.ambient_temperature': \[reference\] takes no keys",
        id="reference-table-with-a-key",
    ),
    # --- TOML syntax
    pytest.param(
        '[streams.main_steam]\nfluid = "water"',
        '[streams.main_steam\nfluid = "water"',
        PlantFileError,
        r"plant\.toml, line \d+, column \d+: not valid TOML",
        id="unclosed-table-header",
    ),
    pytest.param(
        'timezone = "UTC"',
        'timezone = "UTC"\ntimezone = "UTC"',
        PlantFileError,
        r"plant\.toml, line \d+.*not valid TOML",
        id="duplicate-key",
    ),
    pytest.param(
        'timezone = "UTC"',
        "timezone = UTC",
        PlantFileError,
        r"plant\.toml, line \d+.*not valid TOML",
        id="bare-word-value",
    ),
]


@pytest.mark.parametrize("old, new, error, fragment", MUTATIONS)
def test_bad_plant_file(tmp_path, old, new, error, fragment):
    path = tmp_path / "plant.toml"
    path.write_text(mutate(old, new), encoding="utf-8")
    with pytest.raises(error, match=fragment) as info:
        load_and_build(path)
    assert "\n" not in str(info.value).strip() or str(info.value).count("\n") < 5


def test_demo_plant_file_is_valid(tmp_path):
    # the table above is only meaningful if the unchanged file loads and builds
    path = tmp_path / "plant.toml"
    path.write_text(DEMO_TEXT, encoding="utf-8")
    plant = load_and_build(path)
    assert "PT-101" in plant.tags


# (file bytes, error class, fragment)
BAD_BYTES = [
    pytest.param(b"", PlantFileError, r"plant\.toml: the plant file is empty", id="empty"),
    pytest.param(
        b"# only a comment\n\n", PlantFileError, r"plant file is empty", id="comments-only"
    ),
    pytest.param(b"\xff\xfe[\x00s\x00", PlantFileError, r"not UTF-8", id="utf16-bytes"),
    pytest.param(b'[site]\nname = "caf\xe9"\n', PlantFileError, r"not UTF-8", id="latin-1"),
    pytest.param(b"\x00\x00\x00", PlantFileError, r"plant\.toml", id="nul-bytes"),
    pytest.param(b"just some words\n", PlantFileError, r"not valid TOML", id="prose"),
    pytest.param(b'{"site": {}}', PlantFileError, r"not valid TOML", id="json-instead"),
    pytest.param(
        PLANT.encode().replace(b"[tags.TT-1]", b"[tags.TT-1]\n[tags.TT-1]"),
        PlantFileError,
        r"not valid TOML",
        id="table-twice",
    ),
    pytest.param(
        PLANT.encode() + b'[tags.FT-1]\nunit = "t/h"\n',
        PlantFileError,
        r"not valid TOML",
        id="tag-defined-twice",
    ),
    # nesting thousands of levels deep: a message, not a RecursionError or a hang.
    # PLANT has 13 lines; then a blank line (14), [fuel] or the header (15), lhv (16).
    pytest.param(
        PLANT.encode() + b"\n[fuel]\nlhv = " + b"[" * 5000 + b"]" * 5000 + b"\n",
        PlantFileError,
        r"plant\.toml, line 16: arrays or inline tables nested more than 32 levels deep",
        id="arrays-nested-5000-deep",
    ),
    pytest.param(
        PLANT.encode() + b"\n[fuel]\nlhv = " + b"{a = " * 5000 + b"1" + b"}" * 5000 + b"\n",
        PlantFileError,
        r"plant\.toml, line 16: arrays or inline tables nested more than 32 levels deep",
        id="inline-tables-nested-5000-deep",
    ),
    pytest.param(
        PLANT.encode() + b"\n[site." + b".".join([b"a"] * 20000) + b"]\nx = 1\n",
        PlantFileError,
        r"plant\.toml, line 15: a dotted key of more than 32 parts",
        id="table-header-20000-parts",
    ),
    pytest.param(
        PLANT.encode().replace(b'unit = "t/h"', b'unit = "t/h"\nuncertainty = 1.0'),
        PlantFileError,
        r"tags\.FT-1\.uncertainty",
        id="uncertainty-without-kind",
    ),
]


@pytest.mark.parametrize("content, error, fragment", BAD_BYTES)
def test_bad_plant_bytes(tmp_path, content, error, fragment):
    path = tmp_path / "plant.toml"
    path.write_bytes(content)
    with pytest.raises(error, match=fragment):
        load_and_build(path)


def test_missing_plant_file(tmp_path):
    with pytest.raises(PlantFileError, match="does not exist"):
        load_plant(tmp_path / "none.toml")


def test_plant_path_is_a_folder(tmp_path):
    (tmp_path / "plant.toml").mkdir()
    with pytest.raises(PerftestError, match=r"plant\.toml"):
        load_plant(tmp_path / "plant.toml")


def test_utf8_bom_is_accepted(tmp_path):
    # Windows editors write a UTF-8 byte order mark; TOML 1.0 text is UTF-8, and the
    # mark carries no data (Unicode 15.0, section 23.8: U+FEFF at the start is a
    # signature).  It must not make a valid file invalid.
    path = tmp_path / "plant.toml"
    path.write_bytes(b"\xef\xbb\xbf" + PLANT.encode())
    assert load_plant(path).name == "Robustness rig"


# --- data only: nothing in a plant file is executed ------------------------------------

CODE_LIKE = [
    "__import__('os').system('touch PWNED')",
    "open('PWNED', 'w').write('x')",
    "${PWNED}",
    "$(touch PWNED)",
    "`touch PWNED`",
    "{{ 7 * 7 }}",
]


@pytest.mark.parametrize("text", CODE_LIKE)
def test_code_in_text_fields_stays_text(tmp_path, monkeypatch, text):
    monkeypatch.chdir(tmp_path)
    esc = text.replace("\\", "\\\\").replace('"', '\\"')
    body = PLANT.replace('name = "Robustness rig"', f'name = "{esc}"').replace(
        'quantity = "temperature"', f'quantity = "temperature"\ndescription = "{esc}"'
    )
    path = tmp_path / "plant.toml"
    path.write_text(body, encoding="utf-8")
    plant = load_plant(path)
    assert plant.name == text
    assert plant.tags["TT-1"].description == text
    assert not (tmp_path / "PWNED").exists()


@pytest.mark.parametrize("text", CODE_LIKE)
def test_code_in_number_fields_is_refused(tmp_path, monkeypatch, text):
    monkeypatch.chdir(tmp_path)
    esc = text.replace("\\", "\\\\").replace('"', '\\"')
    body = PLANT.replace('unit = "t/h"', f'unit = "t/h"\ncalibration = [0.0, "{esc}"]')
    path = tmp_path / "plant.toml"
    path.write_text(body, encoding="utf-8")
    with pytest.raises(PlantFileError, match=r"tags\.FT-1\.calibration\[1\].*finite number"):
        load_plant(path)
    assert not (tmp_path / "PWNED").exists()
