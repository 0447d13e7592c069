"""Checks of [[guarantees]] and [[corrections]] against the results they name.

A guarantee's value and tolerance must be stated in a unit of the result's
dimension (a COP in kW/kW or "1", a capacity in kW or MW, a heat rate in kJ/kWh,
never in MW); a multiplicative correction must stay positive; one result and
condition may be corrected once.  Each refusal names the key and its line.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from perftest.errors import PerftestError
from perftest.evaluation.plant_keys import _plant_error

__all__ = ["check_guarantee_units", "check_correction_entries", "check_factor"]

# Unit families that describe a dimensionless result (efficiency, COP, heat rate).
_DIMENSIONLESS = ("dimensionless", "fraction", "heat_rate")


def _family(unit: str) -> str | None:
    from perftest.units import parse_unit

    try:
        return parse_unit(unit).quantity
    except PerftestError:
        return None


def _fits(unit: str, result_unit: str, *, difference: bool = False) -> bool:
    from perftest.units import compatible

    fam = _family(unit)
    if fam is None:
        return False
    if result_unit in ("1", "J/J"):
        return fam in _DIMENSIONLESS
    want = _family(result_unit)
    if want is None:  # pragma: no cover - every result unit parses
        return True
    if difference and want == "temperature":
        return fam in ("temperature", "temperature_difference")
    return compatible(fam, want)


def _entries(plant, section: str) -> list:
    entries = getattr(plant, "sections", {}).get(section, [])
    return list(entries) if isinstance(entries, list) else []


def check_guarantee_units(plant, results) -> None:
    """Refuse a guarantee or tolerance whose unit does not fit its result.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
    results : pandas.DataFrame
        :attr:`Performance.results` (``unit`` column in SI).

    Raises
    ------
    PlantFileError
        Naming ``guarantees[i].unit`` (or ``.tolerance``) and its line.
    """
    acceptance = getattr(plant, "sections", {}).get("acceptance", {})
    for i, entry in enumerate(_entries(plant, "guarantees")):
        if not isinstance(entry, Mapping) or entry.get("quantity") not in results.index:
            continue
        q = entry["quantity"]
        r_unit = str(results.loc[q, "unit"])
        unit = entry.get("unit")
        if isinstance(unit, str) and not _fits(unit, r_unit):
            raise _plant_error(
                plant,
                f"[[guarantees]] unit = {unit!r} does not fit {q!r}, a result in "
                f"{_describe_unit(r_unit)}.",
                "guarantees",
                i,
                "unit",
            )
        tol = entry.get("tolerance")
        where = ("guarantees", i, "tolerance")
        if tol is None and isinstance(acceptance, Mapping):
            tol, where = acceptance.get("tolerance"), ("acceptance", "tolerance")
        if isinstance(tol, Mapping) and isinstance(tol.get("unit"), str):
            if not _fits(tol["unit"], r_unit, difference=True):
                raise _plant_error(
                    plant,
                    f"tolerance unit {tol['unit']!r} does not fit {q!r}, a result in "
                    f"{_describe_unit(r_unit)}.",
                    *where,
                )


def _describe_unit(r_unit: str) -> str:
    return {
        "1": 'a ratio ("1", "%", "kW/kW")',
        "J/J": 'an energy ratio ("kJ/kWh", "Btu/kWh", "1")',
        "W": 'power units ("kW", "MW")',
        "K": 'temperature units ("K", "degC")',
    }.get(r_unit, repr(r_unit))


def check_correction_entries(plant) -> None:
    """Refuse a multiplicative curve or table that reaches 0 or below, and an entry
    that corrects the same result for the same condition twice."""
    seen: dict = {}
    for i, entry in enumerate(_entries(plant, "corrections")):
        if not isinstance(entry, Mapping):
            continue
        key = (
            entry.get("result"),
            str(entry.get("variable")),
            str(entry.get("second_variable", "")),
        )
        if key in seen:
            raise _plant_error(
                plant,
                f"[[corrections]] result = {key[0]!r} for variable = {key[1]!r} is given "
                f"twice (entries {seen[key] + 1} and {i + 1}); give each correction once.",
                "corrections",
                i,
                "variable",
            )
        seen[key] = i
        if entry.get("kind", "multiplicative") != "multiplicative":
            continue
        for part, values in (
            (
                "curve",
                (entry.get("curve") or {}).get("y")
                if isinstance(entry.get("curve"), Mapping)
                else None,
            ),
            (
                "surface",
                [v for row in (entry.get("surface") or {}).get("values", []) for v in row]
                if isinstance(entry.get("surface"), Mapping)
                else None,
            ),
        ):
            if not values:
                continue
            try:
                low = min(float(v) for v in values)
            except (TypeError, ValueError):
                continue  # the curve reader names malformed values
            if not low > 0:
                raise _plant_error(
                    plant,
                    f"[[corrections]] a multiplicative {part} divides the result by its "
                    f"value, so every value must be positive. Got {low!r}.",
                    "corrections",
                    i,
                    part,
                )


def check_factor(plant, index: int, factor: float, result: str) -> None:
    """Refuse a multiplicative correction whose factor at the test conditions is not
    positive (a polynomial that crosses zero)."""
    if not (math.isfinite(factor) and factor > 0):
        raise _plant_error(
            plant,
            f"[[corrections]] the multiplicative correction of {result!r} is {factor!r} at "
            "the test conditions; a factor must be positive.",
            "corrections",
            index,
        )
