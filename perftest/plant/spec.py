"""Reading and checking the ``[streams.*]`` and ``[units.*]`` tables of a plant file.

This module turns the raw TOML tables into small frozen records
(:class:`StreamSpec`, :class:`UnitSpec`) and checks everything that can be
checked without numbers: known fluids and phases, known unit types and keys,
streams that exist, a connection rule (every stream is the outlet of at most one
unit and the inlet of at most one unit, and is used by at least one unit), tags
that exist, and units whose balances can be formed.  Every problem is a
:class:`~perftest.errors.PlantFileError` that names the TOML key and its line.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from perftest.errors import PerftestError, PlantFileError

__all__ = [
    "Source",
    "StreamSpec",
    "UnitSpec",
    "ModelSpec",
    "read_model_spec",
    "STREAM_VARIABLES",
    "PHASES",
    "UNIT_TYPES",
]

#: stream variables and the glossary quantity of each
STREAM_VARIABLES = {
    "mass_flow": "mass_flow",
    "pressure": "pressure",
    "temperature": "temperature",
    "enthalpy": "specific_enthalpy",
}

#: phases a stream may declare (``wet`` = two-phase liquid/vapour mixture)
PHASES = ("liquid", "vapour", "wet", "gas", "supercritical")

#: reserved word for an unmeasured variable, accepted wherever a tag may stand
UNMEASURED = "unmeasured"

# Port keys, variables and extra keys of every unit type.  ``ports`` maps a key
# to (minimum count, maximum count or None); ``variables`` maps a unit variable
# to (glossary quantity, present when the key is left out).
_STREAM_PORTS = {"inlets": (1, None), "outlets": (1, None)}
_UNIT_TABLE = {
    "splitter": dict(ports={"inlets": (1, 1), "outlets": (1, None)}, variables={}),
    "mixer": dict(
        ports={"inlets": (1, None), "outlets": (1, 1)},
        variables={"heat_loss": ("heat_flow", False)},
    ),
    "heat_exchanger": dict(
        ports={
            "hot_inlet": (1, 1),
            "hot_outlet": (1, 1),
            "cold_inlet": (1, 1),
            "cold_outlet": (1, 1),
        },
        variables={"heat": ("heat_flow", True), "heat_loss": ("heat_flow", False)},
    ),
    "turbine": dict(
        ports=_STREAM_PORTS,
        variables={"power": ("power", True), "heat_loss": ("heat_flow", False)},
    ),
    "pump": dict(
        ports=_STREAM_PORTS,
        variables={"power": ("power", True), "heat_loss": ("heat_flow", False)},
    ),
    "boiler": dict(
        ports=_STREAM_PORTS,
        variables={"heat": ("heat_flow", True), "heat_loss": ("heat_flow", False)},
        extra=("paths",),
    ),
    "condenser": dict(
        ports={
            "inlets": (1, None),
            "outlets": (1, None),
            "coolant_inlet": (0, 1),
            "coolant_outlet": (0, 1),
        },
        variables={"heat": ("heat_flow", True), "heat_loss": ("heat_flow", False)},
    ),
    "valve": dict(ports={"inlets": (1, 1), "outlets": (1, 1)}, variables={}),
    "generator": dict(
        ports={},
        variables={"power": ("power", True)},
        extra=("shaft", "losses"),
    ),
    "generic": dict(
        ports={"inlets": (0, None), "outlets": (0, None)},
        variables={
            "power": ("power", False),
            "heat": ("heat_flow", False),
            "heat_loss": ("heat_flow", False),
        },
        extra=("balances", "paths"),
    ),
}
# Synonyms: same equations, the name the plant engineer would use.
_ALIASES = {"compressor": "pump", "heater": "boiler", "cooler": "condenser"}
_UNIT_TABLE.update({alias: _UNIT_TABLE[base] for alias, base in _ALIASES.items()})

#: every unit type a plant file may name
UNIT_TYPES = tuple(sorted(_UNIT_TABLE))

_STREAM_KEYS = ("fluid", "phase", *STREAM_VARIABLES, "quality", "description")


@dataclass(frozen=True)
class Source:
    """How one model variable is known.

    Attributes
    ----------
    kind : {"measured", "fixed", "unmeasured"}
    tag : str or None
        Tag or group id of a measured variable.
    value : float or None
        SI value of a fixed variable.
    """

    kind: str
    tag: str | None = None
    value: float | None = None


@dataclass(frozen=True)
class StreamSpec:
    """One stream: fluid, declared phase and how each variable is known.

    ``sources`` maps ``mass_flow``, ``pressure``, ``temperature``, ``enthalpy``
    (and ``quality`` for wet streams when given) to a :class:`Source`.
    """

    id: str
    fluid: str
    phase: str | None
    sources: dict = field(default_factory=dict)


@dataclass(frozen=True)
class UnitSpec:
    """One unit: type, connected streams and unit variables.

    Attributes
    ----------
    id, type : str
        ``type`` is the base type (aliases resolved); ``declared_type`` as written.
    ports : dict[str, tuple[str, ...]]
        Port key (``inlets``, ``hot_inlet`` ...) -> stream ids.
    variables : dict[str, Source]
        Unit variables that take part in the equations (``power``, ``heat``,
        ``heat_loss``, ``losses``).
    shaft : tuple[str, ...]
        Generator: ids of the turbines whose shaft power it converts.
    loss_fraction : float or None
        Generator: losses as a fraction of the electrical output.
    balances : tuple[str, ...]
        Which balances the unit contributes (``mass``, ``energy``).
    paths : tuple[tuple[str, str], ...]
        Boiler/generic: (inlet, outlet) pairs with a mass balance of their own.
    """

    id: str
    type: str
    declared_type: str
    ports: dict = field(default_factory=dict)
    variables: dict = field(default_factory=dict)
    shaft: tuple = ()
    loss_fraction: float | None = None
    balances: tuple = ()
    paths: tuple = ()

    @property
    def inlets(self) -> tuple:
        """All inlet streams, whatever the port key."""
        return tuple(s for key, ids in self.ports.items() if _is_inlet(key) for s in ids)

    @property
    def outlets(self) -> tuple:
        """All outlet streams, whatever the port key."""
        return tuple(s for key, ids in self.ports.items() if not _is_inlet(key) for s in ids)


@dataclass(frozen=True)
class ModelSpec:
    """Checked streams and units of a plant, in file order."""

    streams: dict
    units: dict
    tag_ids: tuple  # every tag/group id the model refers to, first-use order


def _is_inlet(port: str) -> bool:
    return port.endswith("inlet") or port == "inlets"


def _fail(plant, message: str, *keys) -> PlantFileError:
    """Build the error through the plant so that it carries file, key and line."""
    return plant.error(message, *keys)


def _same_si(a: str, b: str) -> bool:
    """Two glossary quantities held in the same SI unit (power and heat flow: W)."""
    from perftest.units import si_unit

    try:
        return si_unit(a) == si_unit(b)
    except PerftestError:
        return True  # a quantity the unit table does not know: not this check's business


def _read_source(plant, value, quantity: str, keys, tag_ids: list) -> Source:
    """A tag/group id, the word ``unmeasured``, or a fixed value with unit."""
    if isinstance(value, str):
        if value == UNMEASURED:
            return Source("unmeasured")
        if value not in plant.tags and value not in plant.groups:
            raise _fail(
                plant,
                f"'{value}' is neither a tag nor a group of this plant. "
                "Declare it under [tags] or [groups], write a fixed value "
                '{ value = ..., unit = "..." }, or write "unmeasured".',
                *keys,
            )
        spec = plant.tags.get(value) or plant.groups.get(value)
        measures = getattr(spec, "quantity", None)
        if measures and measures != quantity and not _same_si(measures, quantity):
            raise _fail(
                plant,
                f"'{value}' measures {measures.replace('_', ' ')}, but this variable is a "
                f"{quantity.replace('_', ' ')}. Name a tag of that quantity, or correct the "
                "tag's unit or quantity.",
                *keys,
            )
        if value not in tag_ids:
            tag_ids.append(value)
        return Source("measured", tag=value)
    if isinstance(value, bool):
        raise _fail(
            plant,
            f'expected a tag id, "unmeasured" or a value with unit. Got {value!r}.',
            *keys,
        )
    # A quality may be a bare number (a fraction); everything else needs its unit.
    default = "fraction" if quantity == "fraction" else None
    return Source(
        "fixed", value=float(plant.read_quantity(value, quantity, *keys, default_unit=default))
    )


def _stream_list(plant, value, keys) -> tuple:
    if isinstance(value, str):
        return (value,)
    if isinstance(value, list) and all(isinstance(v, str) for v in value):
        return tuple(value)
    raise _fail(
        plant,
        f"expected a stream id or a list of stream ids. Got {value!r}.",
        *keys,
    )


def _check_keys(plant, table: dict, allowed, keys) -> None:
    for key in table:
        if key not in allowed:
            raise _fail(
                plant,
                f"unknown key. Known keys here: {', '.join(sorted(allowed))}.",
                *keys,
                key,
            )


def _read_stream(plant, sid: str, table, tag_ids: list) -> StreamSpec:
    keys = ("streams", sid)
    if not isinstance(table, dict):
        raise _fail(plant, "expected a table of stream keys.", *keys)
    _check_keys(plant, table, _STREAM_KEYS, keys)
    if "fluid" not in table or not isinstance(table["fluid"], str):
        raise _fail(
            plant,
            "missing key 'fluid' (e.g. fluid = \"water\").",
            *keys,
        )
    fluid = table["fluid"]
    _check_fluid(plant, fluid, (*keys, "fluid"))
    phase = table.get("phase")
    if phase is not None and phase not in PHASES:
        raise _fail(
            plant,
            f"unknown phase {phase!r}. Known phases: {', '.join(PHASES)}.",
            *keys,
            "phase",
        )
    sources = {}
    for var, quantity in STREAM_VARIABLES.items():
        if var in table:
            sources[var] = _read_source(plant, table[var], quantity, (*keys, var), tag_ids)
        else:
            sources[var] = Source("unmeasured")
    if "quality" in table:
        if phase != "wet":
            raise _fail(
                plant,
                'a quality is only meaningful for a stream with phase = "wet".',
                *keys,
                "quality",
            )
        sources["quality"] = _read_source(
            plant, table["quality"], "fraction", (*keys, "quality"), tag_ids
        )
        if sources["quality"].kind == "unmeasured":
            del sources["quality"]
    return StreamSpec(id=sid, fluid=fluid, phase=phase, sources=sources)


def _check_fluid(plant, fluid: str, keys) -> None:
    # The property layer knows which names are valid; its message is kept.
    from perftest.thermo.properties import get_fluid

    try:
        get_fluid(fluid)
    except PerftestError as exc:
        raise _fail(
            plant,
            f'unknown fluid {fluid!r} ({exc}). Use "water", '
            '"water:IAPWS95", "air" or a CoolProp fluid name.',
            *keys,
        ) from None


def _read_unit(plant, uid: str, table, streams: dict, tag_ids: list) -> UnitSpec:
    keys = ("units", uid)
    if not isinstance(table, dict):
        raise _fail(plant, "expected a table of unit keys.", *keys)
    declared = table.get("type")
    if declared not in _UNIT_TABLE:
        what = "missing key 'type'" if declared is None else f"unknown unit type {declared!r}"
        raise _fail(
            plant,
            f"{what}. Known types: {', '.join(UNIT_TYPES)}.",
            *keys,
            *(("type",) if declared is not None else ()),
        )
    base = _ALIASES.get(declared, declared)
    rule = _UNIT_TABLE[declared]
    allowed = ("type", "description", *rule["ports"], *rule["variables"], *rule.get("extra", ()))
    _check_keys(plant, table, allowed, keys)

    ports = {}
    for port, (lo, hi) in rule["ports"].items():
        ids = _stream_list(plant, table[port], (*keys, port)) if port in table else ()
        for sid in ids:
            if sid not in streams:
                raise _fail(
                    plant,
                    f"stream '{sid}' is not defined. "
                    "Add a [streams." + sid + "] table or fix the name.",
                    *keys,
                    port,
                )
        if len(ids) < lo or (hi is not None and len(ids) > hi):
            need = f"exactly {lo}" if lo == hi else f"at least {lo}"
            if hi is not None and lo != hi:
                need = f"{lo} to {hi}"
            raise _fail(
                plant,
                f"a {declared} needs {need} stream(s) in '{port}' to form "
                f"its balances; got {len(ids)}.",
                *keys,
                *((port,) if port in table else ()),
            )
        ports[port] = ids
    if base == "condenser" and (len(ports["coolant_inlet"]) != len(ports["coolant_outlet"])):
        raise _fail(
            plant,
            "give both 'coolant_inlet' and 'coolant_outlet' or neither.",
            *keys,
        )

    variables = {}
    for var, (quantity, default_present) in rule["variables"].items():
        if var in table:
            variables[var] = _read_source(plant, table[var], quantity, (*keys, var), tag_ids)
        elif default_present:
            variables[var] = Source("unmeasured")

    shaft, loss_fraction = (), None
    if base == "generator":
        if "shaft" not in table:
            raise _fail(
                plant,
                "a generator needs 'shaft' = the id of the turbine "
                "(or a list of turbine ids) whose shaft power it converts.",
                *keys,
            )
        shaft = _stream_list(plant, table["shaft"], (*keys, "shaft"))
        losses = table.get("losses", UNMEASURED)
        if isinstance(losses, dict) and losses.get("kind") == "percent":
            rest = {k: v for k, v in losses.items() if k != "kind"}
            if set(rest) != {"value"} or not isinstance(rest["value"], (int, float)):
                raise _fail(
                    plant,
                    'write { value = 1.2, kind = "percent" }.',
                    *keys,
                    "losses",
                )
            loss_fraction = float(rest["value"]) / 100.0
        elif isinstance(losses, dict):
            rest = {k: v for k, v in losses.items() if k != "kind"}
            if losses.get("kind", "absolute") != "absolute":
                raise _fail(
                    plant,
                    f'\'kind\' must be "percent" or "absolute". Got {losses.get("kind")!r}.',
                    *keys,
                    "losses",
                )
            variables["losses"] = _read_source(plant, rest, "power", (*keys, "losses"), tag_ids)
        else:
            variables["losses"] = _read_source(plant, losses, "power", (*keys, "losses"), tag_ids)

    balances: tuple = ("mass", "energy")
    if base in ("generator",):
        balances = ("energy",)
    if base == "generic":
        raw = table.get("balances", ["mass", "energy"])
        if not isinstance(raw, list) or not raw or any(b not in ("mass", "energy") for b in raw):
            raise _fail(
                plant,
                f'expected a list drawn from "mass" and "energy". Got {raw!r}.',
                *keys,
                *(("balances",) if "balances" in table else ()),
            )
        balances = tuple(dict.fromkeys(raw))
        if not ports["inlets"] and not ports["outlets"]:
            raise _fail(
                plant,
                "a generic unit needs streams in 'inlets' or 'outlets'.",
                *keys,
            )

    paths = ()
    if "paths" in table:
        raw = table["paths"]
        ok = isinstance(raw, list) and all(
            isinstance(p, list) and len(p) == 2 and all(isinstance(s, str) for s in p) for p in raw
        )
        if not ok:
            raise _fail(
                plant,
                "expected a list of [inlet, outlet] pairs, "
                'e.g. [["feedwater", "main_steam"], ["cold_reheat", "hot_reheat"]].',
                *keys,
                "paths",
            )
        paths = tuple((a, b) for a, b in raw)
        used_in = [a for a, _ in paths]
        used_out = [b for _, b in paths]
        if sorted(used_in) != sorted(ports["inlets"]) or sorted(used_out) != sorted(
            ports["outlets"]
        ):
            raise _fail(
                plant,
                "every inlet and every outlet must appear in exactly one path.",
                *keys,
                "paths",
            )

    return UnitSpec(
        id=uid,
        type=base,
        declared_type=declared,
        ports=ports,
        variables=variables,
        shaft=shaft,
        loss_fraction=loss_fraction,
        balances=balances,
        paths=paths,
    )


def read_model_spec(plant) -> ModelSpec:
    """Check the ``[streams]`` and ``[units]`` tables of ``plant``.

    Parameters
    ----------
    plant : perftest.plant.file.Plant

    Returns
    -------
    ModelSpec

    Raises
    ------
    PlantFileError
        Naming the key and line of the first problem found.
    """
    raw_streams = plant.sections.get("streams") or {}
    raw_units = plant.sections.get("units") or {}
    if not raw_streams or not raw_units:
        missing = "streams" if not raw_streams else "units"
        raise _fail(
            plant,
            f"The plant file has no [{missing}.*] tables; a balance model needs both "
            "[streams.<id>] and [units.<id>] tables.",
        )
    tag_ids: list = []
    streams = {sid: _read_stream(plant, sid, t, tag_ids) for sid, t in raw_streams.items()}
    units = {uid: _read_unit(plant, uid, t, streams, tag_ids) for uid, t in raw_units.items()}

    # Connection rule: a stream leaves at most one unit and enters at most one unit.
    source_of: dict = {}
    sink_of: dict = {}
    for uid, unit in units.items():
        for port, ids in unit.ports.items():
            book = sink_of if _is_inlet(port) else source_of
            role = "inlet" if _is_inlet(port) else "outlet"
            for sid in ids:
                if sid in book:
                    other = book[sid]
                    raise _fail(
                        plant,
                        f"stream '{sid}' is already an {role} "
                        f"of unit '{other}'. A stream joins two units at most (outlet of "
                        "one, inlet of the other); add a splitter or mixer.",
                        "units",
                        uid,
                        port,
                    )
                book[sid] = uid
        for sid in set(unit.inlets) & set(unit.outlets):
            raise _fail(
                plant,
                f"stream '{sid}' is both an inlet and an outlet.",
                "units",
                uid,
            )
    for sid in streams:
        if sid not in source_of and sid not in sink_of:
            raise _fail(
                plant,
                f"stream '{sid}' is used by no unit. Name it in "
                "the inlets/outlets of a unit or delete it.",
                "streams",
                sid,
            )

    # Generators convert the shaft power of turbines.
    driven: dict = {}
    for uid, unit in units.items():
        for tid in unit.shaft:
            if tid not in units or units[tid].type != "turbine":
                raise _fail(
                    plant,
                    f"'{tid}' is not a turbine of this plant. Name a unit with type = \"turbine\".",
                    "units",
                    uid,
                    "shaft",
                )
            if tid in driven:
                raise _fail(
                    plant,
                    f"turbine '{tid}' already drives generator '{driven[tid]}'.",
                    "units",
                    uid,
                    "shaft",
                )
            driven[tid] = uid
    return ModelSpec(streams=streams, units=units, tag_ids=tuple(tag_ids))
