"""Build a :class:`~perftest.plant.records.Plant` from the parsed TOML of a plant file.

The loader first checks every key of the file against the schema
(:func:`perftest.plant.checks.check_against_schema`), then validates the sections it
owns (``site``, ``tags``, ``groups``, ``stability``) into records and keeps the others
(``streams``, ``units``, ``fuel``, ``performance``, ``corrections``, ``guarantees``,
``reference``, ``acceptance``, ``design``) as raw tables in :attr:`Plant.sections` for the
modules that own them.

Decisions
---------
* A tag's ``quantity`` may be left out when its ``unit`` is given; it is then the
  quantity the unit measures (``"t/h"`` -> ``mass_flow``).  Write it out for
  temperature differences (``"K"`` alone reads as a temperature).
* A tag without ``uncertainty`` has a systematic standard uncertainty of 0; such
  tags are listed in :attr:`Plant.tags_without_uncertainty` so reports can show them.
* Two tags may read the same column only when both name a ``source`` and the
  sources differ.
* ``site.atmospheric_pressure`` and ``site.barometer_tag`` exclude each other, and a
  plant with a gauge-pressure tag needs one of them.
* A group lists at least two tags of the same quantity; its id must not be a tag id.
"""

from __future__ import annotations

import difflib
from pathlib import Path

from perftest import units as _units
from perftest.errors import PlantFileError, UnitError
from perftest.plant.checks import check_against_schema
from perftest.plant.records import (
    _STANDARD_ATMOSPHERE,
    DEFAULT_STABILITY,
    GroupSpec,
    Plant,
    SiteSettings,
    StabilityLimit,
    TagSpec,
    UncertaintySpec,
)
from perftest.plant.scanner import line_of as _line_of
from perftest.plant.scanner import located_error as _make_error
from perftest.plant.scanner import scan_lines as _scan_lines
from perftest.plant.schema import (
    _ARRAY_SECTIONS,
    _LIMIT_KINDS,
    _RAW_SECTIONS,
    _UNCERTAINTY_KINDS,
)
from perftest.plant.values import is_number as _is_number
from perftest.plant.values import read_quantity as _read_quantity
from perftest.plant.values import type_name as _type_name

__all__ = ["build_plant"]


def build_plant(path: Path, text: str, data: dict) -> Plant:
    """Validate parsed plant-file data and build the :class:`Plant`.

    Parameters
    ----------
    path : pathlib.Path
        The file, for messages.
    text : str
        Its text (for the line numbers of messages).
    data : dict
        What ``tomllib.loads(text)`` returned.

    Returns
    -------
    Plant

    Raises
    ------
    PlantFileError
        Naming the file, line and key of the first problem.
    """
    return _Loader(path, text, data).load()


class _Loader:
    def __init__(self, path: Path, text: str, data: dict):
        self.path = path
        self.text = text
        self.data = data
        self.lines = _scan_lines(text)

    def error(self, message, *keys) -> PlantFileError:
        return _make_error(self.path, self.lines, message, keys)

    def table(self, value, *keys) -> dict:
        if not isinstance(value, dict):
            raise self.error(f"must be a table. Got {_type_name(value)}.", *keys)
        return value

    def text_value(self, value, *keys) -> str:
        if not isinstance(value, str):
            raise self.error(f"must be a text. Got {_type_name(value)}.", *keys)
        return value

    def number(self, value, *keys, positive=False, nonnegative=False) -> float:
        if not _is_number(value):
            raise self.error(f"must be a finite number. Got {_type_name(value)}.", *keys)
        if positive and value <= 0:
            raise self.error(f"must be greater than zero. Got {value!r}.", *keys)
        if nonnegative and value < 0:
            raise self.error(f"must not be negative. Got {value!r}.", *keys)
        return float(value)

    def quantity(self, value, quantity, *keys, **kw) -> float:
        return _read_quantity(self.path, self.lines, value, quantity, keys, **kw)

    # -- sections ------------------------------------------------------------

    def load(self) -> Plant:
        # every key of every section against the one schema, before anything is built
        check_against_schema(self.data, self.error, lambda *keys: _line_of(self.lines, keys))
        site_raw = self.table(self.data.get("site", {}), "site")
        tags_raw = self.table(self.data.get("tags", {}), "tags")
        tags = {tid: self.tag(tid, t) for tid, t in tags_raw.items()}
        self.check_columns(tags)
        groups_raw = self.table(self.data.get("groups", {}), "groups")
        groups = {gid: self.group(gid, g, tags) for gid, g in groups_raw.items()}
        site = self.site(site_raw, tags)
        self.check_gauge(site, tags)
        stability = dict(DEFAULT_STABILITY)
        for q, lim in self.table(self.data.get("stability", {}), "stability").items():
            if q not in _units.QUANTITIES:
                raise self.error(
                    f"unknown quantity {q!r}. Use one of {', '.join(_units.QUANTITIES)}.",
                    "stability",
                    q,
                )
            stability[q] = self.limit(lim, q, None, "stability", q)
        sections = {}
        for name in _RAW_SECTIONS:
            default = [] if name in _ARRAY_SECTIONS else {}
            raw = self.data.get(name, default)
            if name in _ARRAY_SECTIONS and not isinstance(raw, list):
                raise self.error(
                    f"must be an array of tables, written [[{name}]]. Got {_type_name(raw)}.",
                    name,
                )
            if name not in _ARRAY_SECTIONS and not isinstance(raw, dict):
                raise self.error(f"must be a table [{name}]. Got {_type_name(raw)}.", name)
            sections[name] = raw
        return Plant(
            path=self.path,
            name=site.name,
            site=site,
            tags=tags,
            groups=groups,
            stability=stability,
            sections=sections,
            text=self.text,
            _lines=self.lines,
        )

    def site(self, raw: dict, tags: dict) -> SiteSettings:
        name = self.text_value(raw.get("name", self.path.stem), "site", "name")
        tz = self.text_value(raw.get("timezone", "UTC"), "site", "timezone")
        try:
            from zoneinfo import ZoneInfo

            ZoneInfo(tz)
        except Exception:
            raise self.error(
                f"unknown time zone {tz!r}. Write an IANA zone such as 'UTC', "
                "'Europe/Berlin' or 'America/Chicago'.",
                "site",
                "timezone",
            ) from None

        def tag_ref(key, quantity):
            if key not in raw:
                return None
            tid = self.text_value(raw[key], "site", key)
            if tid not in tags:
                raise self.error(f"names tag {tid!r}, which is not in [tags].", "site", key)
            q = tags[tid].quantity
            if q != quantity:
                raise self.error(
                    f"tag {tid!r} measures {q}; this key needs a {quantity} tag.", "site", key
                )
            return tid

        def fixed(key, quantity, tag_key):
            if key in raw and tag_key in raw:
                raise self.error(
                    f"give either {key!r} or {tag_key!r}, not both.",
                    "site",
                    tag_key,
                )
            if key not in raw:
                return None
            return self.quantity(raw[key], quantity, "site", key)

        atm = fixed("atmospheric_pressure", "pressure", "barometer_tag")
        baro = tag_ref("barometer_tag", "pressure")
        if baro is not None and tags[baro].unit and _units.parse_unit(tags[baro].unit).gauge:
            raise self.error(
                f"the barometer tag {baro!r} is logged as a gauge pressure "
                f"({tags[baro].unit!r}); it must be absolute.",
                "site",
                "barometer_tag",
            )
        if atm is not None and not 5e3 <= atm <= 1.2e5:
            # an atmosphere outside 5-120 kPa is a unit slip (e.g. bar written as kPa)
            raise self.error(
                f"an atmospheric pressure of {atm:.6g} Pa is not plausible (5 kPa to 120 kPa).",
                "site",
                "atmospheric_pressure",
            )
        t0 = fixed("dead_state_temperature", "temperature", "dead_state_temperature_tag")
        t0_tag = tag_ref("dead_state_temperature_tag", "temperature")
        if t0 is not None and t0 <= 0:
            raise self.error(
                f"must be above absolute zero. Got {t0:.6g} K.", "site", "dead_state_temperature"
            )
        p0 = fixed("dead_state_pressure", "pressure", "dead_state_pressure_tag")
        p0_tag = tag_ref("dead_state_pressure_tag", "pressure")
        if p0 is None and p0_tag is None:
            p0 = _STANDARD_ATMOSPHERE
        return SiteSettings(
            name=name,
            timezone=tz,
            atmospheric_pressure=atm,
            barometer_tag=baro,
            dead_state_temperature=t0,
            dead_state_temperature_tag=t0_tag,
            dead_state_pressure=p0,
            dead_state_pressure_tag=p0_tag,
        )

    def tag(self, tid: str, raw) -> TagSpec:
        k0 = ("tags", tid)
        raw = self.table(raw, *k0)
        unit = None
        if "unit" in raw:
            unit = self.text_value(raw["unit"], *k0, "unit")
            try:
                uspec = _units.parse_unit(unit)
            except UnitError as exc:
                raise self.error(str(exc), *k0, "unit") from None
        if "quantity" in raw:
            quantity = self.text_value(raw["quantity"], *k0, "quantity")
            if quantity not in _units.QUANTITIES:
                near = difflib.get_close_matches(quantity, _units.QUANTITIES, n=1, cutoff=0.6)
                hint = f" Did you mean {near[0]!r}?" if near else ""
                raise self.error(
                    f"unknown quantity {quantity!r}.{hint} "
                    f"Use one of {', '.join(_units.QUANTITIES)}.",
                    *k0,
                    "quantity",
                )
        elif unit is not None:
            quantity = uspec.quantity
        else:
            raise self.error(
                "needs a 'quantity' (e.g. quantity = \"temperature\") or a 'unit'.", *k0
            )
        if unit is not None and not _units.compatible(uspec.quantity, quantity):
            raise self.error(
                f"the unit {unit!r} measures {uspec.quantity}, but the tag's quantity is "
                f"{quantity}. Write a {quantity} unit such as {_units._EXAMPLES[quantity]}, "
                "or correct the quantity.",
                *k0,
                "unit",
            )
        column = self.text_value(raw.get("column", tid), *k0, "column")
        source = self.text_value(raw["source"], *k0, "source") if "source" in raw else None
        description = self.text_value(raw.get("description", ""), *k0, "description")

        span = None
        if "span" in raw:
            s = raw["span"]
            if not (isinstance(s, list) and len(s) == 2):
                raise self.error(
                    f"must be [low, high] in the tag's unit. Got {_type_name(s)}.", *k0, "span"
                )
            lo = self.number(s[0], *k0, "span", 0)
            hi = self.number(s[1], *k0, "span", 1)
            if not lo < hi:
                raise self.error(f"low must be below high. Got [{lo}, {hi}].", *k0, "span")
            span = (lo, hi)

        uncertainty = None
        if "uncertainty" in raw:
            uncertainty = self.uncertainty(raw["uncertainty"], *k0, "uncertainty")
            if uncertainty.kind == "percent_of_span" and span is None:
                raise self.error(
                    "kind 'percent_of_span' needs the tag's span = [low, high] "
                    "(in the tag's unit).",
                    *k0,
                    "uncertainty",
                    "kind",
                )

        calibration = None
        if "calibration" in raw:
            c = raw["calibration"]
            if not (isinstance(c, list) and c):
                raise self.error(
                    "must be an array of polynomial coefficients [c0, c1, ...] "
                    f"(ascending powers). Got {_type_name(c)}.",
                    *k0,
                    "calibration",
                )
            calibration = tuple(self.number(v, *k0, "calibration", i) for i, v in enumerate(c))
        shared = None
        if "shared_calibration" in raw:
            shared = self.text_value(raw["shared_calibration"], *k0, "shared_calibration")

        density = None
        needs_density = (
            unit is not None and uspec.density_exponent == 1 and quantity == "mass_flow"
        ) or (unit is not None and uspec.density_exponent == -1)
        if "density" in raw:
            if not needs_density:
                why = (
                    'the tag is a volume flow; set quantity = "mass_flow" to convert it'
                    if quantity == "volume_flow"
                    else f"the unit {unit!r} is no volume unit"
                )
                raise self.error(f"is not used: {why}. Remove it.", *k0, "density")
            density = self.quantity(raw["density"], "density", *k0, "density", default_unit="kg/m3")
            if density <= 0:
                raise self.error(f"must be positive. Got {density:.6g} kg/m3.", *k0, "density")
        elif needs_density:
            raise self.error(
                f"the unit {unit!r} is a volume unit and the quantity is {quantity}: give the "
                "fluid density at the metering conditions, density = { value = ..., "
                'unit = "kg/m3" }.',
                *k0,
                "unit",
            )

        stability = None
        if "stability" in raw:
            stability = self.limit(raw["stability"], quantity, unit, *k0, "stability")

        sentinels: tuple = ()
        if "sentinels" in raw:
            s = raw["sentinels"]
            s = s if isinstance(s, list) else [s]
            for i, v in enumerate(s):
                if not (isinstance(v, str) or _is_number(v)):
                    raise self.error(
                        f"sentinels must be numbers or texts. Got {_type_name(v)}.",
                        *k0,
                        "sentinels",
                        i,
                    )
            sentinels = tuple(s)

        return TagSpec(
            id=tid,
            column=column,
            quantity=quantity,
            unit=unit,
            description=description,
            uncertainty=uncertainty,
            span=span,
            calibration=calibration,
            shared_calibration=shared,
            density=density,
            stability=stability,
            source=source,
            sentinels=sentinels,
        )

    def uncertainty(self, raw, *keys) -> UncertaintySpec:
        raw = self.table(raw, *keys)
        if "value" not in raw:
            raise self.error("the 'value' is missing.", *keys)
        value = self.number(raw["value"], *keys, "value", nonnegative=True)
        if "kind" not in raw:
            raise self.error(
                f"the 'kind' is missing: one of {', '.join(_UNCERTAINTY_KINDS)}.", *keys
            )
        kind = self.text_value(raw["kind"], *keys, "kind")
        if kind not in _UNCERTAINTY_KINDS:
            raise self.error(
                f"kind must be one of {', '.join(_UNCERTAINTY_KINDS)}. Got {kind!r}.",
                *keys,
                "kind",
            )
        level = raw.get("level", 0.95)
        if level != "standard":
            if not _is_number(level):
                raise self.error(
                    f'level must be a coverage probability such as 0.95, or "standard". '
                    f"Got {_type_name(level)}.",
                    *keys,
                    "level",
                )
            if not 0 < level < 1:
                hint = f" Write {level / 100:g}, not {level}." if 1 < level < 100 else ""
                raise self.error(
                    f"level must lie between 0 and 1 (e.g. 0.95).{hint}", *keys, "level"
                )
            level = float(level)
        k = None
        if "k" in raw:
            k = self.number(raw["k"], *keys, "k", positive=True)
        return UncertaintySpec(value=value, kind=kind, level=level, k=k)

    def limit(self, raw, quantity, unit, *keys) -> StabilityLimit:
        raw = self.table(raw, *keys)
        if "value" not in raw:
            raise self.error("the 'value' is missing.", *keys)
        value = self.number(raw["value"], *keys, "value", positive=True)
        kind = self.text_value(raw.get("kind", "percent"), *keys, "kind")
        if kind not in _LIMIT_KINDS:
            raise self.error(f"kind must be 'percent' or 'absolute'. Got {kind!r}.", *keys, "kind")
        if kind == "percent":
            if "unit" in raw:
                raise self.error("a percent limit takes no unit. Remove it.", *keys, "unit")
            return StabilityLimit(value, "percent", None, value / 100.0)
        lunit = raw.get("unit", unit)
        if lunit is None:
            raise self.error(
                'an absolute limit needs its unit, e.g. { value = 0.5, kind = "absolute", '
                'unit = "K" }.',
                *keys,
            )
        si = self.quantity({"value": value, "unit": lunit}, quantity, *keys, difference=True)
        return StabilityLimit(value, "absolute", lunit, si)

    def check_columns(self, tags: dict) -> None:
        seen: dict[str, list[TagSpec]] = {}
        for t in tags.values():
            for other in seen.get(t.column, []):
                if t.source is None or other.source is None or t.source == other.source:
                    keys = ("tags", t.id)
                    if "column" in self.data["tags"][t.id]:
                        keys += ("column",)
                    raise self.error(
                        f"column {t.column!r} is already read by tag {other.id!r}. Two tags may "
                        "share a column only when both name a different 'source' file.",
                        *keys,
                    )
            seen.setdefault(t.column, []).append(t)

    def group(self, gid: str, raw, tags: dict) -> GroupSpec:
        k0 = ("groups", gid)
        raw = self.table(raw, *k0)
        if gid in tags:
            raise self.error(f"group id {gid!r} is also a tag id; give the group its own id.", *k0)
        members = raw.get("tags")
        if not isinstance(members, list) or len(members) < 2:
            raise self.error(
                'must list at least two tag ids, e.g. tags = ["FT-101A", "FT-101B"]. '
                f"Got {_type_name(members) if members is not None else 'nothing'}.",
                *k0,
                "tags",
            )
        quantity = None
        for i, m in enumerate(members):
            if not isinstance(m, str) or m not in tags:
                near = difflib.get_close_matches(str(m), list(tags), n=1, cutoff=0.6)
                hint = f" Did you mean {near[0]!r}?" if near else ""
                raise self.error(f"names {m!r}, which is not in [tags].{hint}", *k0, "tags", i)
            if members.index(m) != i:
                raise self.error(f"lists tag {m!r} twice.", *k0, "tags", i)
            q = tags[m].quantity
            if quantity is None:
                quantity = q
            elif q != quantity:
                raise self.error(
                    f"tag {m!r} measures {q}, but {members[0]!r} measures {quantity}; a group "
                    "averages instruments of one quantity.",
                    *k0,
                    "tags",
                    i,
                )
        agreement = None
        if "agreement" in raw:
            units_ = {tags[m].unit for m in members}
            common = units_.pop() if len(units_) == 1 else None
            agreement = self.limit(raw["agreement"], quantity, common, *k0, "agreement")
        desc = self.text_value(raw.get("description", ""), *k0, "description")
        return GroupSpec(gid, tuple(members), quantity, agreement, desc)

    def check_gauge(self, site: SiteSettings, tags: dict) -> None:
        if site.atmospheric_pressure is not None or site.barometer_tag is not None:
            return
        for t in tags.values():
            if t.unit is not None and _units.parse_unit(t.unit).gauge:
                raise self.error(
                    f"the unit {t.unit!r} is a gauge (or vacuum) pressure and needs an "
                    "atmospheric reference: set site.atmospheric_pressure = { value = ..., "
                    'unit = "kPa" } or site.barometer_tag.',
                    "tags",
                    t.id,
                    "unit",
                )
