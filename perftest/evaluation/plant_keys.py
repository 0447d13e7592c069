"""Reading the [performance] table of a plant file: which keys belong to which kind,
and checks of what they name.

References are tag ids, group ids or model variables (``"stream.var"``,
``"unit.var"``); a list means a sum.  ``heat_export``, ``heat_return`` and
``makeup`` (CHP) name streams.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from perftest.errors import PerftestError, PlantFileError
from perftest.plant.combustion import FLUE_KEYS as _FLUE_KEYS  # the firing side's keys

__all__ = ["KINDS", "KIND_KEYS", "KEY_RESULTS", "performance_kind", "key_results"]

_POWER_REQUIRED = ("gross_power", "heat_input", "source_temperature", "sink_temperature")
_POWER_OPTIONAL = ("auxiliary_power", "cycle_heat", "basis", *_FLUE_KEYS)

#: Per kind: (required keys, optional keys) of ``[performance]`` besides ``kind``.
KIND_KEYS = {
    "power": (_POWER_REQUIRED, _POWER_OPTIONAL),
    "chp": ((*_POWER_REQUIRED, "heat_export", "makeup"), (*_POWER_OPTIONAL, "heat_return")),
    "refrigeration": (
        ("power_input", "cooling", "cold_temperature", "hot_temperature"),
        ("heat_rejected",),
    ),
    "heat_pump": (("power_input", "heating", "cold_temperature", "hot_temperature"), ()),
    "boiler": (("useful_heat",), ("basis", *_FLUE_KEYS)),
}
KINDS = tuple(KIND_KEYS)

#: Headline results of each kind: the planning summary and the monitor's trend.
KEY_RESULTS = {
    "power": (
        "net_power",
        "heat_input",
        "first_law_efficiency",
        "heat_rate",
        "carnot_efficiency",
        "second_law_efficiency",
    ),
    "chp": (
        "net_power",
        "heat_input",
        "heat_export",
        "fuel_utilisation",
        "power_to_heat_ratio",
        "exergetic_efficiency",
    ),
    "refrigeration": (
        "cooling_capacity",
        "power_input",
        "cop",
        "carnot_cop",
        "second_law_efficiency",
    ),
    "heat_pump": ("heating_capacity", "power_input", "cop", "carnot_cop", "second_law_efficiency"),
    "boiler": ("useful_heat", "heat_input", "boiler_efficiency"),
}

# Keys whose value names streams (not variables), and keys that may be lists.
STREAM_KEYS = ("heat_export", "heat_return", "makeup")
_LIST_KEYS = (
    "gross_power",
    "auxiliary_power",
    "cycle_heat",
    "power_input",
    "cooling",
    "heating",
    "heat_rejected",
    "heat_export",
    "heat_return",
    "useful_heat",
)


def performance_kind(plant) -> str:
    """The ``[performance] kind`` of a plant (``"power"`` when absent or no table)."""
    table = plant.sections.get("performance") if hasattr(plant, "sections") else None
    if isinstance(table, Mapping):
        return str(table.get("kind", "power"))
    return "power"


def key_results(kind: str) -> tuple[str, ...]:
    """Headline result names of a plant kind (:data:`KEY_RESULTS`)."""
    return KEY_RESULTS.get(kind, KEY_RESULTS["power"])


def refs_of(table: Mapping, key: str) -> list[str]:
    """The reference(s) of a key as a list (a string is a list of one)."""
    v = table.get(key)
    if v is None:
        return []
    return [v] if isinstance(v, str) else list(v)


def _performance_table(plant) -> dict:
    """The ``[performance]`` table, checked against the keys of its kind."""
    table = plant.sections.get("performance")
    if not isinstance(table, Mapping) or not table:
        raise PlantFileError(
            f"{plant.path}: the plant file has no [performance] table; evaluate needs at "
            "least gross_power, heat_input, source_temperature and sink_temperature "
            '(kind = "power"), or the keys of another kind.',
            file=plant.path,
            key="performance",
        )
    kind = table.get("kind", "power")
    if kind not in KIND_KEYS:
        raise _plant_error(
            plant,
            f"[performance] kind must be one of {', '.join(map(repr, KINDS))}. Got {kind!r}.",
            "performance",
            "kind",
        )
    required, optional = KIND_KEYS[kind]
    allowed = ("kind", *required, *optional)
    for key in table:
        if key not in allowed:
            raise _plant_error(
                plant,
                f"[performance] key '{key}' does not belong to kind = {kind!r}. "
                f"Keys of this kind: {', '.join(allowed)}.",
                "performance",
                key,
            )
    for key in required:
        if key not in table:
            what = "a stream id" if key in STREAM_KEYS else "a tag, group or model variable"
            raise _plant_error(
                plant,
                f"[performance] kind = {kind!r} needs '{key}' = {what}.",
                "performance",
            )
    for key, v in table.items():
        if key in ("kind", "basis", *_FLUE_KEYS):
            continue  # the firing side is read by perftest.plant.combustion
        ok = isinstance(v, str) and v != ""
        if key in _LIST_KEYS and isinstance(v, list):
            ok = len(v) > 0 and all(isinstance(s, str) and s for s in v) and len(set(v)) == len(v)
        if not ok:
            what = "a stream id" if key in STREAM_KEYS else "a tag, group or model variable"
            plural = " or a list of them (no repeats)" if key in _LIST_KEYS else ""
            raise _plant_error(
                plant,
                f"[performance] '{key}' must be {what}{plural}. Got {v!r}.",
                "performance",
                key,
            )
    return dict(table)


def _plant_error(plant, message: str, *keys) -> PerftestError:
    err = getattr(plant, "error", None)
    if callable(err):
        return err(message, *keys)
    return PlantFileError(message, key=".".join(keys))


def _check_name(rec, name: str, key: str, plant, value=None) -> float:
    """``rec.value(name)``, refused when ``name`` is unknown or not observable.

    ``value`` (optional) is used instead of ``rec.value`` (a memo of its values).
    """
    try:
        v = rec.value(name) if value is None else value(name)
    except PerftestError:
        raise _plant_error(
            plant,
            f"[{key.split('.')[0]}] '{key.split('.', 1)[-1]}' = {name!r} is neither a tag, "
            "a group nor a variable of the plant model.",
            *key.split("."),
        ) from None
    if not math.isfinite(v):
        raise PerftestError(
            f"'{name}' (plant file key {key}) is not determined by the measurements and "
            "balances (not observable); measure it or fix its value.",
            key=key,
        )
    return v
