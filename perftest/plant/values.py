"""Reading TOML values of the plant file: numbers, type names for messages, and
values with units converted to SI."""

from __future__ import annotations

import math

from perftest import units as _units
from perftest.errors import InputError, UnitError
from perftest.plant.scanner import located_error as _make_error

__all__ = ["is_number", "type_name", "read_quantity"]


def is_number(v) -> bool:
    """True for a finite int or float (a TOML boolean is not a number)."""
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def type_name(v) -> str:
    """What a TOML value is, in words for a message ("a table", "an array", ...)."""
    return {dict: "a table", list: "an array", str: "a text", bool: "a boolean"}.get(
        type(v), f"{type(v).__name__} {v!r}"
    )


def read_quantity(
    path,
    lines,
    value,
    quantity,
    keys,
    *,
    default_unit=None,
    difference=False,
    atmospheric_pressure=None,
    density=None,
) -> float:
    """Read ``{ value, unit }`` or a bare number (in ``default_unit``) as SI.

    ``path`` and ``lines`` (from :func:`~perftest.plant.scanner.scan_lines`) and the
    key path ``keys`` locate the messages; see :meth:`Plant.read_quantity`.
    """

    def err(msg, *k):
        return _make_error(path, lines, msg, keys + k)

    example = f"{{ value = ..., unit = {_units._EXAMPLES[quantity].split(',')[0]} }}"
    if isinstance(value, dict):
        extra = sorted(set(value) - {"value", "unit"})
        if extra:
            raise err(
                f"unknown key {extra[0]!r}; a value with a unit is written {example}.",
                extra[0],
            )
        if "value" not in value:
            raise err(f"the 'value' is missing; write {example}.")
        number, unit = value["value"], value.get("unit", default_unit)
        if unit is None:
            raise err(f"the 'unit' is missing; write {example}.")
        if not isinstance(unit, str):
            raise err(f"the unit must be a text such as {_units._EXAMPLES[quantity]}.", "unit")
        where = ("value",)
    elif default_unit is not None:
        number, unit, where = value, default_unit, ()
    else:
        raise err(f"must be a {quantity} with its unit, written {example}. Got {type_name(value)}.")
    if not is_number(number):
        raise err(f"must be a finite number. Got {type_name(number)}.", *where)
    try:
        return float(
            _units.to_si(
                float(number),
                unit,
                quantity=quantity,
                atmospheric_pressure=atmospheric_pressure,
                density=density,
                difference=difference,
            )
        )
    except (UnitError, InputError) as exc:
        k = ("unit",) if isinstance(value, dict) else ()
        raise err(str(exc), *k) from None
