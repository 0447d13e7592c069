"""What a plant file may contain: every section, every key, its type and its meaning.

Declarative only.  The tables below are the one description of the plant file:
:mod:`perftest.plant.checks` refuses any key they do not name (with the file, line
and a "did you mean" suggestion), checks the TOML type of every value and the keys
that belong to one plant ``kind`` or unit ``type`` only; :mod:`perftest.plant.keydocs`
renders them as the key tables of docs/plant-file.md.  The meaning of values
(ranges, units, references to tags and model variables) is checked by the module
that uses each section: the loader for ``site``, ``tags``, ``groups`` and
``stability``, :mod:`perftest.plant.spec` for ``streams`` and ``units``, and
:mod:`perftest.evaluation` and :mod:`perftest.planning` for the rest.

Value types are the TOML ones: ``"text"``, ``"number"`` (integer or float),
``"boolean"``, ``"array"``, ``"table"``.  A key that accepts a table lists the table's
keys in ``fields``; a table of named entries (``[tags.<ID>]``) gives the schema of
one entry in ``entries``.
"""

from __future__ import annotations

from dataclasses import dataclass

from perftest.plant import spec as _spec

__all__ = [
    "Key",
    "Table",
    "PLANT_FILE",
    "KNOWN_SECTIONS",
    "PLANT_KINDS",
    "KEY_TABLES",
]


@dataclass(frozen=True)
class Table:
    """The keys a TOML table may hold.

    Attributes
    ----------
    title : str
        How messages name the table ("[site]", "a tag").
    keys : tuple of Key
        Its fixed keys.
    entries : Key or None
        For a table of named entries (``[tags.<ID>]``): the schema of every entry;
        any entry name is accepted.
    switch : str or None
        Key whose value selects the keys with a matching ``Key.only`` (``kind`` of
        ``[performance]``, ``type`` of a unit).
    switch_default : str or None
        Value of ``switch`` when it is left out.
    """

    title: str
    keys: tuple = ()
    entries: Key | None = None
    switch: str | None = None
    switch_default: str | None = None

    def key(self, name: str) -> Key | None:
        """The :class:`Key` called ``name``, or None."""
        for k in self.keys:
            if k.name == name:
                return k
        return None


@dataclass(frozen=True)
class Key:
    """One key of a table.

    Attributes
    ----------
    name : str
    doc : str
        Meaning, as printed in docs/plant-file.md (Markdown).
    types : tuple of str
        TOML types accepted: ``text``, ``number``, ``boolean``, ``array``, ``table``.
    fields : Table or None
        Keys of a table value (or of the tables in an array value).
    items : tuple of str
        Types of the elements of an array value (empty: not checked here).
    choices : tuple of str
        The texts a text value may be (empty: any text).
    default : str
        The default as shown in the docs ("" when there is none).
    required : bool
        Must be given (checked by the module that reads the section).
    only : tuple of str
        The values of the table's ``switch`` this key belongs to (empty: all).
    label : str
        The value column of the docs, when the types do not say enough.
    """

    name: str
    doc: str
    types: tuple = ("text",)
    fields: Table | None = None
    items: tuple = ()
    choices: tuple = ()
    default: str = ""
    required: bool = False
    only: tuple = ()
    label: str = ""


# --------------------------------------------------------------------------- small tables

_VALUE_UNIT = Table(
    "a value with its unit",
    (
        Key("value", "the number", ("number",), required=True),
        Key("unit", "its unit (see *Unit strings*)"),
    ),
)
_UNCERTAINTY = Table(
    "an uncertainty",
    (
        Key("value", "stated value (>= 0), in the tag's unit or in percent", ("number",),
            required=True),
        Key("kind", "`absolute` (tag's unit), `percent_of_reading` or `percent_of_span`",
            choices=("absolute", "percent_of_reading", "percent_of_span"), required=True),
        Key("level", 'coverage it was stated at, between 0 and 1, or `"standard"`',
            ("number", "text"), default="0.95"),
        Key("k", "coverage factor stated on a certificate (overrides `level`)", ("number",)),
    ),
)  # fmt: skip
_LIMIT = Table(
    "a permissible variation",
    (
        Key("value", "± permissible deviation from the window mean", ("number",), required=True),
        Key("kind", "`percent` of the mean or `absolute`", choices=("percent", "absolute"),
            default='`"percent"`'),
        Key("unit", "unit of an `absolute` value (default: the tag's unit)"),
    ),
)  # fmt: skip
_QUANTITY = ("number", "table")  # a bare number in a default unit, or { value, unit }
_TAG_OR_VALUE = ("text", "table")  # a tag/group id, "unmeasured", or { value, unit }


# --------------------------------------------------------------------------- [site]

SITE = Table(
    "[site]",
    (
        Key("name", "plant name shown in reports", default="the file name"),
        Key("timezone", "IANA zone the logs are written in when their timestamps carry no "
            "offset", default='`"UTC"`'),
        Key("atmospheric_pressure", "reference for gauge pressures, or", ("table",), _VALUE_UNIT),
        Key("barometer_tag", "a logged tag (absolute pressure) used as the reference, sample "
            "by sample"),
        Key("dead_state_temperature", "exergy reference temperature, fixed", ("table",),
            _VALUE_UNIT, default="298.15 K"),
        Key("dead_state_temperature_tag", "... or logged"),
        Key("dead_state_pressure", "exergy reference pressure, fixed", ("table",), _VALUE_UNIT,
            default="101.325 kPa"),
        Key("dead_state_pressure_tag", "... or logged"),
    ),
)  # fmt: skip

# --------------------------------------------------------------------------- [tags], [groups]

TAG = Table(
    "a tag",
    (
        Key("column", "column header in the run file", default="the tag id"),
        Key("source", "file stem the column must come from, when several files carry it"),
        Key("quantity", "glossary name (`pressure`, `temperature`, `mass_flow`, "
            "`volume_flow`, `power`, `heat_flow`, `fraction`, `temperature_difference`, ...)",
            default="the quantity of `unit`"),
        Key("unit", 'unit as logged (`"barg"`, `"degC"`, `"t/h"`, `"MW"`, ...) when the file '
            "has no units row"),
        Key("description", "free text"),
        Key("uncertainty", "systematic uncertainty of the instrument", ("table",), _UNCERTAINTY,
            default="0 (listed)"),
        Key("span", "`[low, high]` in the tag's unit (needed for `percent_of_span`)",
            ("array",), items=("number",)),
        Key("calibration", "polynomial coefficients in ascending powers, applied in the "
            "tag's unit: `corrected = c0 + c1*x + c2*x^2`", ("array",), items=("number",)),
        Key("shared_calibration", "name of a calibration lot; systematic errors of tags in "
            "one lot are fully correlated"),
        Key("density", "for a volume-flow unit converted to mass flow", _QUANTITY, _VALUE_UNIT,
            label="`{ value, unit }` or number [kg/m3]"),
        Key("stability", "permissible variation, overriding `[stability]`", ("table",), _LIMIT),
        Key("sentinels", 'extra values that mean "bad sample"', ("number", "text", "array"),
            items=("number", "text")),
        Key("trusted", "never dropped by serial elimination; settles a choice among "
            "instruments the tests cannot tell apart", ("boolean",), default="false"),
    ),
)  # fmt: skip
GROUP = Table(
    "a group",
    (
        Key("tags", "member tag ids (at least two, one quantity)", ("array",), items=("text",),
            required=True),
        Key("agreement", "largest permitted difference between member means", ("table",),
            _LIMIT),
        Key("description", "free text"),
    ),
)  # fmt: skip

# --------------------------------------------------------------------------- [streams], [units]

_STREAM_DOCS = {
    "fluid": ('`"water"` (IAPWS-IF97), `"water:IAPWS95"`, `"air"`, any CoolProp fluid name',
              ("text",)),
    "phase": ("`liquid`, `vapour`, `wet`, `gas` or `supercritical`: needed near saturation",
              ("text",)),
    "mass_flow": ('tag or group id, fixed `{ value, unit }` or `"unmeasured"`', _TAG_OR_VALUE),
    "pressure": ("as `mass_flow`", _TAG_OR_VALUE),
    "temperature": ("as `mass_flow`", _TAG_OR_VALUE),
    "enthalpy": ("as `mass_flow`", _TAG_OR_VALUE),
    "quality": ("`wet` streams only: tag id or fixed value (a bare number is a fraction)",
                ("text", "number", "table")),
    "description": ("free text", ("text",)),
}  # fmt: skip
STREAM = Table(
    "a stream",
    tuple(
        Key(name, doc, types, _VALUE_UNIT if "table" in types else None,
            required=name == "fluid",
            default='`"unmeasured"`' if name in _spec.STREAM_VARIABLES else "")
        for name, (doc, types) in _STREAM_DOCS.items()
    ),
)  # fmt: skip

_UNIT_DOCS = {
    "type": ("unit type: " + ", ".join(f"`{t}`" for t in _spec.UNIT_TYPES), ("text",)),
    "inlets": ("a stream id or a list of stream ids", ("text", "array")),
    "outlets": ("a stream id or a list of stream ids", ("text", "array")),
    "hot_inlet": ("heat exchanger: hot side in (one stream)", ("text", "array")),
    "hot_outlet": ("heat exchanger: hot side out", ("text", "array")),
    "cold_inlet": ("heat exchanger: cold side in", ("text", "array")),
    "cold_outlet": ("heat exchanger: cold side out", ("text", "array")),
    "coolant_inlet": ("condenser/cooler: cooling side in (both or neither)", ("text", "array")),
    "coolant_outlet": ("condenser/cooler: cooling side out", ("text", "array")),
    "power": ("turbine: shaft power out; pump: power in; generator: electrical output; "
              'generic: power out. Tag id, `{ value, unit }` or `"unmeasured"`', _TAG_OR_VALUE),
    "heat": ("boiler: heat absorbed; condenser: heat rejected; heat exchanger: heat taken up "
             "by the cold side; generic: heat in", _TAG_OR_VALUE),
    "heat_loss": ('`"unmeasured"` adds an unmeasured loss to the energy balance; a value or '
                  "tag fixes or measures it", _TAG_OR_VALUE),
    "shaft": ("generator: the turbine id(s) whose shaft power it converts", ("text", "array")),
    "losses": ('generator: `{ value, kind = "percent" }`, `{ value, unit }`, a tag id or '
               '`"unmeasured"`', _TAG_OR_VALUE),
    "balances": ('generic: a list drawn from `"mass"`, `"energy"`', ("array",)),
    "paths": ("boiler, generic: `[[inlet, outlet], ...]` pairs with a mass balance each",
              ("array",)),
    "description": ("free text", ("text",)),
}  # fmt: skip
_LOSSES = Table(
    "generator losses",
    (
        Key("value", "the number", ("number",), required=True),
        Key("unit", "unit of an absolute loss"),
        Key("kind", "`percent` of the electrical output or `absolute`",
            choices=("percent", "absolute")),
    ),
)  # fmt: skip


def _unit_key_types() -> dict:
    """Unit type -> the keys it takes, from the model's own table (one source)."""
    out = {}
    for utype in _spec.UNIT_TYPES:
        rule = _spec._UNIT_TABLE[utype]
        out[utype] = ("type", "description", *rule["ports"], *rule["variables"],
                      *rule.get("extra", ()))  # fmt: skip
    return out


UNIT_KEYS_BY_TYPE: dict = _unit_key_types()


def _unit_key(name: str) -> Key:
    doc, types = _UNIT_DOCS[name]
    owners = tuple(t for t, keys in UNIT_KEYS_BY_TYPE.items() if name in keys)
    every = len(owners) == len(UNIT_KEYS_BY_TYPE)
    fields = _LOSSES if name == "losses" else (_VALUE_UNIT if "table" in types else None)
    return Key(name, doc, types, fields, required=name == "type", only=() if every else owners)


UNIT = Table("a unit", tuple(_unit_key(k) for k in _UNIT_DOCS), switch="type")

# --------------------------------------------------------------------------- [fuel]

FUEL = Table(
    "[fuel]",
    (
        Key("mass_flow", "tag or group id of the fuel mass flow"),
        Key("volume_flow", "... or of its volume flow (at `reference_conditions`)"),
        Key("lhv", "measured lower (net) heating value", _QUANTITY, _VALUE_UNIT,
            label="`{ value, unit }` or number [MJ/kg]"),
        Key("hhv", "measured higher (gross) heating value", _QUANTITY, _VALUE_UNIT,
            label="`{ value, unit }` or number [MJ/kg]"),
        Key("composition", "mole fractions by component (`methane = 0.93`, ...); calorific "
            "values by the ISO 6976 method", ("table",),
            Table("a composition", entries=Key("<component>", "mole fraction", ("number",))),
            label="table of numbers"),
        Key("combustion_reference_temperature", "reference temperature of the calorific "
            "value from `composition`", ("table",), _VALUE_UNIT, default="15 °C"),
        Key("uncertainty", "of the heating value", ("table",), Table(
            "a heating-value uncertainty",
            (
                Key("value", "the number", ("number",), required=True),
                Key("kind", "`percent` of the heating value or `absolute`",
                    choices=("percent", "absolute"), default='`"percent"`'),
                Key("level", 'coverage, or `"standard"`', ("number", "text"), default="0.95"),
                Key("unit", "unit of an `absolute` value", default="MJ/kg"),
            ),
        ), default="0.3 % at 95 % (noted)"),
        Key("exergy_ratio", "fuel exergy / LHV", ("number",),
            default="from the composition, else 1.04"),
        Key("reference_conditions", "metering conditions of `volume_flow`", ("table",), Table(
            "reference conditions",
            (
                Key("temperature", "metering temperature", ("table",), _VALUE_UNIT),
                Key("pressure", "metering pressure", ("table",), _VALUE_UNIT),
            ),
        ), default="15 °C, 101.325 kPa", label="`{ temperature, pressure }`"),
    ),
)  # fmt: skip

# --------------------------------------------------------------------------- [performance]

#: Plant kinds of ``[performance] kind`` (docs/plant-file.md, "Plant kinds").
PLANT_KINDS = ("power", "chp", "refrigeration", "heat_pump", "boiler")

_HEAT_ENGINE = ("power", "chp")
_FLUE = ("power", "chp", "boiler")
_REFS = ("text", "array")  # a reference, or a list of references (a sum)
_REFS_LABEL = "reference or array of references (a sum)"
_LOSS = ("number", "table")
_LOSS_FIELDS = Table(
    "a loss",
    (
        Key("value", "the number", ("number",), required=True),
        Key("unit", "unit of a heat flow"),
        Key("kind", "`percent` of the heat input or `absolute`", choices=("percent", "absolute"),
            default="`percent` without `unit`"),
        Key("uncertainty", "standard uncertainty, same kind and unit as `value`", ("number",),
            default="half the value"),
    ),
)  # fmt: skip

PERFORMANCE = Table(
    "[performance]",
    (
        Key("kind", "what the plant does: " + ", ".join(f"`{k}`" for k in PLANT_KINDS),
            choices=PLANT_KINDS, default='`"power"`'),
        Key("gross_power", "generator output", _REFS, label=_REFS_LABEL, required=True,
            only=_HEAT_ENGINE),
        Key("auxiliary_power", "plant auxiliary consumption (net = gross − auxiliary)", _REFS,
            label=_REFS_LABEL, default="0", only=_HEAT_ENGINE),
        Key("heat_input", '`"fuel"` (fuel flow × heating value of `[fuel]`) or a variable',
            _REFS, label=_REFS_LABEL, required=True, only=_HEAT_ENGINE),
        Key("basis", "heating-value basis of `heat_input` and the efficiencies that use it",
            choices=("lhv", "hhv"), default='`"lhv"`', only=_FLUE),
        Key("source_temperature", "heat-source temperature for the Carnot bound (e.g. "
            '`"main_steam.temperature"`)', label="reference", required=True, only=_HEAT_ENGINE),
        Key("sink_temperature", 'heat-sink temperature (e.g. `"cw_in.temperature"`)',
            label="reference", required=True, only=_HEAT_ENGINE),
        Key("cycle_heat", "heat absorbed by the working fluid", _REFS, label=_REFS_LABEL,
            default="the model's boiler/heater units", only=_HEAT_ENGINE),
        Key("heat_export", "streams leaving with useful heat", _REFS, label=_REFS_LABEL,
            required=True, only=("chp",)),
        Key("heat_return", "streams coming back", _REFS, label=_REFS_LABEL, only=("chp",)),
        Key("makeup", "stream whose enthalpy values the water not returned",
            label="stream id", only=("chp",)),
        Key("power_input", "electrical (or shaft) power driving the machine", _REFS,
            label=_REFS_LABEL, required=True, only=("refrigeration", "heat_pump")),
        Key("cooling", "heat drawn from the cold side", _REFS, label=_REFS_LABEL, required=True,
            only=("refrigeration",)),
        Key("heating", "heat delivered on the hot side", _REFS, label=_REFS_LABEL, required=True,
            only=("heat_pump",)),
        Key("cold_temperature", "cold-side temperature for the Carnot COP", label="reference",
            required=True, only=("refrigeration", "heat_pump")),
        Key("hot_temperature", "hot-side temperature for the Carnot COP", label="reference",
            required=True, only=("refrigeration", "heat_pump")),
        Key("heat_rejected", "heat rejected on the hot side (a check of the energy balance)",
            _REFS, label=_REFS_LABEL, only=("refrigeration",)),
        Key("useful_heat", "heat taken up by the water/steam (direct method; fuel from "
            "`[fuel]`)", _REFS, label=_REFS_LABEL, required=True, only=("boiler",)),
        Key("flue_gas_o2", "oxygen in the flue gas (tag, or `{ value, unit }`)", _TAG_OR_VALUE,
            _VALUE_UNIT, only=_FLUE),
        Key("flue_gas_co2", "carbon dioxide in the flue gas", _TAG_OR_VALUE, _VALUE_UNIT,
            only=_FLUE),
        Key("flue_gas_oxygen_basis", "whether `flue_gas_o2`/`flue_gas_co2` are on dry or "
            "wet gas", choices=("dry", "wet"), default='`"dry"`', only=_FLUE),
        Key("flue_gas_co", "carbon monoxide in the flue gas (unburnt loss)", _TAG_OR_VALUE,
            _VALUE_UNIT, only=_FLUE),
        Key("flue_gas_temperature", "flue-gas temperature at the boiler exit", _TAG_OR_VALUE,
            _VALUE_UNIT, only=_FLUE),
        Key("air_temperature", "combustion-air temperature (reference of the losses)",
            _TAG_OR_VALUE, _VALUE_UNIT, only=_FLUE),
        Key("air_relative_humidity", "combustion-air relative humidity", _TAG_OR_VALUE,
            _VALUE_UNIT, only=_FLUE, default="dry air (noted)"),
        Key("combustion_air_flow", "mass flow of the dry combustion air (metered flow less "
            "its water); a second check of the fuel meter and the O2 analyser", _TAG_OR_VALUE,
            _VALUE_UNIT, only=_FLUE),
        Key("radiation_loss", "surface (radiation and convection) loss", _LOSS, _LOSS_FIELDS,
            only=_FLUE, label="number [%] or `{ value, unit, kind, uncertainty }`"),
        Key("other_losses", "other losses of the indirect method", _LOSS, _LOSS_FIELDS,
            only=_FLUE, label="number [%] or `{ value, unit, kind, uncertainty }`"),
    ),
    switch="kind",
    switch_default="power",
)  # fmt: skip

# --------------------------------------------------------------------------- corrections etc.

_CURVE = Table(
    "a correction curve",
    (
        Key("x", "values of the variable", ("array",), items=("number",), required=True),
        Key("y", "factors (multiplicative) or offsets (additive)", ("array",),
            items=("number",), required=True),
        Key("x_unit", "unit of `x`", default="the reference's unit"),
        Key("y_unit", "additive curves: unit of the offsets"),
    ),
)  # fmt: skip
_SURFACE = Table(
    "a correction surface",
    (
        Key("x", "values of `variable`", ("array",), items=("number",), required=True),
        Key("y", "values of `second_variable`", ("array",), items=("number",), required=True),
        Key("values", "one row per `x` with one number per `y`", ("array",), items=("array",),
            required=True),
        Key("x_unit", "unit of `x`", default="the reference's unit"),
        Key("y_unit", "unit of `y`", default="the second reference's unit"),
        Key("values_unit", "additive tables: unit of the offsets"),
    ),
)  # fmt: skip
CORRECTION = Table(
    "a [[corrections]] entry",
    (
        Key("result", "the result corrected (`net_power`, `heat_rate`, ...)", required=True),
        Key("variable", "tag or model variable the correction depends on", required=True),
        Key("reference", "reference condition of `variable`", _QUANTITY, _VALUE_UNIT,
            required=True, label="`{ value, unit }`"),
        Key("kind", "`multiplicative` divides by the curve value, `additive` subtracts it",
            choices=("multiplicative", "additive"), default='`"multiplicative"`'),
        Key("curve", "1-D table, linear interpolation (no extrapolation)", ("table",), _CURVE),
        Key("polynomial", "`[c0, c1, ...]` in the deviation `x - reference`", ("array",),
            items=("number",)),
        Key("second_variable", "a surface's second variable"),
        Key("second_reference", "its reference condition", _QUANTITY, _VALUE_UNIT,
            label="`{ value, unit }`"),
        Key("surface", "2-D table over `variable` and `second_variable`, bilinear",
            ("table",), _SURFACE),
        Key("name", "label in the report"),
    ),
)  # fmt: skip
_TOLERANCE = Table(
    "a tolerance",
    (
        Key("value", "the number (>= 0)", ("number",), required=True),
        Key("kind", "`percent` of the guaranteed value or `absolute`",
            choices=("percent", "absolute"), default='`"absolute"`'),
        Key("unit", "unit of an absolute tolerance", default="SI"),
    ),
)  # fmt: skip
_RULES = ("guarded", "supplier_benefit", "plain", "tolerance")
GUARANTEE = Table(
    "a [[guarantees]] entry",
    (
        Key("quantity", "the result guaranteed (`corrected_net_power`, ...)", required=True),
        Key("value", "guaranteed value", ("number",), required=True),
        Key("unit", "its unit", default="SI"),
        Key("direction", "`at_least` or `at_most`", choices=("at_least", "at_most"),
            required=True),
        Key("rule", "verdict rule (below)", choices=_RULES, default="`[acceptance] rule`"),
        Key("tolerance", "contractual tolerance for `rule = \"tolerance\"`", ("table",),
            _TOLERANCE),
        Key("description", "free text"),
    ),
)  # fmt: skip
ACCEPTANCE = Table(
    "[acceptance]",
    (
        Key("rule", "verdict rule of every guarantee that names none", choices=_RULES,
            default='`"guarded"`'),
        Key("tolerance", "tolerance for `rule = \"tolerance\"`", ("table",), _TOLERANCE),
    ),
)  # fmt: skip

# --------------------------------------------------------------------------- runs, points

_TIME_DOC = "naive times are in `[site] timezone`"
RUN = Table(
    "a [[runs]] entry",
    (
        Key("start", f"start of the run, e.g. `\"2026-05-14 09:00\"` ({_TIME_DOC})",
            required=True),
        Key("end", "end of the run", required=True),
        Key("label", "name in the reports", default='`"run 1"`, `"run 2"`, ...'),
    ),
)  # fmt: skip
POINT = Table(
    "a [[points]] entry",
    (
        Key("label", "name of the load point in the reports (`\"100 %\"`, ...)",
            required=True),
        Key("start", f"start of the point's window ({_TIME_DOC})", required=True),
        Key("end", "end of the point's window", required=True),
        Key("reference", "reference conditions of this point: correction variable = "
            "`{ value, unit }`, overriding that variable's `[[corrections]]` reference",
            ("table",), Table("a point's reference conditions", entries=Key(
                "<variable>", "its reference value", _QUANTITY, _VALUE_UNIT))),
        Key("guarantees", "this point's guarantees, entries as in `[[guarantees]]` "
            "(`[]` judges none)", ("array",), GUARANTEE, items=("table",),
            default="first point: the plant's `[[guarantees]]`; others: none"),
        Key("weight", "weight in the weighted part-load figures (`weighted_cop`, ...); "
            "every point or none; normalised to sum to one", ("number",)),
    ),
)  # fmt: skip

# --------------------------------------------------------------------------- [design]

_DURATION = ("text", "number")
DESIGN_TAG = Key(
    "<tag>",
    "design value of a tag",
    ("table", "number"),
    Table(
        "a design tag",
        (
            Key("value", "design value of the tag, in the tag's `unit`", ("number",),
                required=True),
            Key("scatter", "standard deviation of single samples about the mean in a steady "
                "test", ("number",), default="0 (random part ignored, noted)"),
            Key("interval", "sampling interval of this tag", _DURATION,
                default="`[design] interval`"),
            Key("correlation_time", "correlation time of the sample noise (AR(1))",
                _DURATION, default="0 (independent samples)"),
        ),
    ),
)  # fmt: skip
DESIGN = Table(
    "[design]",
    (
        Key("duration", 'planned test length (text such as `"90min"`, or seconds)',
            _DURATION, default="2 h (noted)"),
        Key("interval", "sampling interval of every tag unless it states its own", _DURATION,
            default="1 min"),
        Key("tags", "design value and scatter of every tag", ("table",),
            Table("[design.tags]", entries=DESIGN_TAG), required=True),
        Key("runs", "repeated runs planned (integer >= 1); the plan then also predicts the "
            "U95 of their mean", ("number",), default="1"),
        Key("allowed", "expanded uncertainty the contract allows, per result", ("table",),
            Table("[design.allowed]", entries=Key("<result>", "allowed U95", ("table",),
                                                  _TOLERANCE))),
    ),
)  # fmt: skip

# --------------------------------------------------------------------------- the file

#: The reference conditions of corrections live in each [[corrections]] entry; the
#: table is kept (empty) so that older files with an empty [reference] still load.
REFERENCE = Table("[reference]")

PLANT_FILE = Table(
    "the plant file",
    (
        Key("site", "where the plant is", ("table",), SITE),
        Key("tags", "one table per instrument", ("table",), Table("[tags]", entries=Key(
            "<ID>", "a tag", ("table",), TAG))),
        Key("groups", "redundant instruments averaged into one value", ("table",),
            Table("[groups]", entries=Key("<ID>", "a group", ("table",), GROUP))),
        Key("stability", "permissible variation per quantity", ("table",),
            Table("[stability]", entries=Key("<quantity>", "a limit", ("table",), _LIMIT))),
        Key("streams", "streams of the plant model", ("table",),
            Table("[streams]", entries=Key("<ID>", "a stream", ("table",), STREAM))),
        Key("units", "units of the plant model", ("table",),
            Table("[units]", entries=Key("<ID>", "a unit", ("table",), UNIT))),
        Key("fuel", "the fuel and its heating value", ("table",), FUEL),
        Key("performance", "which values make up the results", ("table",), PERFORMANCE),
        Key("corrections", "corrections to reference conditions", ("array",), CORRECTION,
            items=("table",)),
        Key("guarantees", "contract guarantees", ("array",), GUARANTEE, items=("table",)),
        Key("reference", "kept for older files; must be empty", ("table",), REFERENCE),
        Key("acceptance", "verdict rule of the guarantees", ("table",), ACCEPTANCE),
        Key("design", "design point and planned test, for `perftest plan`", ("table",),
            DESIGN),
        Key("runs", "repeated runs of one condition (a test of several runs)", ("array",),
            RUN, items=("table",)),
        Key("points", "load points (a test at several loads)", ("array",), POINT,
            items=("table",)),
    ),
)  # fmt: skip

#: Top-level tables of a plant file.
KNOWN_SECTIONS: tuple[str, ...] = tuple(k.name for k in PLANT_FILE.keys)
#: Sections the loader turns into records; the others are kept raw in Plant.sections.
_RECORD_SECTIONS = ("site", "tags", "groups", "stability")
_RAW_SECTIONS = tuple(s for s in KNOWN_SECTIONS if s not in _RECORD_SECTIONS)
_ARRAY_SECTIONS = tuple(k.name for k in PLANT_FILE.keys if k.types == ("array",))

#: The key tables of docs/plant-file.md: marker name -> (table, key path prefix).
KEY_TABLES: dict = {
    "site": SITE,
    "tags": TAG,
    "tags.uncertainty": _UNCERTAINTY,
    "groups": GROUP,
    "stability": _LIMIT,
    "streams": STREAM,
    "units": UNIT,
    "fuel": FUEL,
    "performance": PERFORMANCE,
    "corrections": CORRECTION,
    "corrections.curve": _CURVE,
    "corrections.surface": _SURFACE,
    "guarantees": GUARANTEE,
    "acceptance": ACCEPTANCE,
    "design": DESIGN,
    "design.tags": DESIGN_TAG.fields,
    "runs": RUN,
    "points": POINT,
}

# The loader's choices, from the tables above.
_UNCERTAINTY_KINDS = _UNCERTAINTY.key("kind").choices
_LIMIT_KINDS = _LIMIT.key("kind").choices
