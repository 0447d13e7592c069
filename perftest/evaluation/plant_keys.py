"""Reading the [performance] table of a plant file: which keys, and checks of what they name."""

from __future__ import annotations

import math
from collections.abc import Mapping

from perftest.errors import PerftestError, PlantFileError


def _performance_table(plant) -> dict:
    table = plant.sections.get("performance")
    if not isinstance(table, Mapping) or not table:
        raise PlantFileError(
            f"{plant.path}: the plant file has no [performance] table; evaluate needs at "
            "least gross_power, heat_input, source_temperature and sink_temperature.",
            file=plant.path,
            key="performance",
        )
    kind = table.get("kind", "power")
    if kind != "power":
        raise _plant_error(
            plant,
            f"[performance] kind = {kind!r} is not evaluated by this version of perftest "
            '(only "power"); compute COP results with perftest.evaluation.performance.',
            "performance",
            "kind",
        )
    for key in ("gross_power", "heat_input", "source_temperature", "sink_temperature"):
        if not isinstance(table.get(key), str):
            raise _plant_error(
                plant,
                f"[performance] needs '{key}' = a tag, group or model variable "
                f'(e.g. "main_steam.temperature").',
                "performance",
                key,
            )
    return dict(table)


def _plant_error(plant, message: str, *keys) -> PerftestError:
    err = getattr(plant, "error", None)
    if callable(err):
        return err(message, *keys)
    return PlantFileError(message, key=".".join(keys))


def _check_name(rec, name: str, key: str, plant) -> None:
    try:
        v = rec.value(name)
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
