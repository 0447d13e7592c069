"""What a plant file may contain: its sections and the keys of each.

Declarative only: names, no reading.  :mod:`perftest.plant.loader` checks the
file against these tables.
"""

from __future__ import annotations

__all__ = ["KNOWN_SECTIONS"]

#: Top-level tables of a plant file.  The first four are validated by the loader.
KNOWN_SECTIONS: tuple[str, ...] = (
    "site",
    "tags",
    "groups",
    "stability",
    "streams",
    "units",
    "fuel",
    "performance",
    "corrections",
    "guarantees",
    "reference",
    "acceptance",
    "design",
)
_RAW_SECTIONS = (
    "streams",
    "units",
    "fuel",
    "performance",
    "corrections",
    "guarantees",
    "reference",
    "acceptance",
    "design",
)
_ARRAY_SECTIONS = ("corrections", "guarantees")

_SITE_KEYS = (
    "name",
    "timezone",
    "atmospheric_pressure",
    "barometer_tag",
    "dead_state_temperature",
    "dead_state_temperature_tag",
    "dead_state_pressure",
    "dead_state_pressure_tag",
)
_TAG_KEYS = (
    "column",
    "source",
    "quantity",
    "unit",
    "description",
    "uncertainty",
    "span",
    "calibration",
    "shared_calibration",
    "density",
    "stability",
    "sentinels",
)
_UNCERTAINTY_KEYS = ("value", "kind", "level", "k")
_UNCERTAINTY_KINDS = ("absolute", "percent_of_reading", "percent_of_span")
_GROUP_KEYS = ("tags", "agreement", "description")
_LIMIT_KEYS = ("value", "kind", "unit")
_LIMIT_KINDS = ("percent", "absolute")
