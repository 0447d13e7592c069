"""The plant file: one TOML file that describes a plant (schema in docs/plant-file.md).

:func:`load_plant` reads and validates the sections this module owns (``site``,
``tags``, ``groups``, ``stability``) and keeps the others (``streams``, ``units``,
``fuel``, ``performance``, ``corrections``, ``guarantees``, ``reference``) as raw
tables in :attr:`Plant.sections` for the modules that own them.  Those modules
report their own problems with :meth:`Plant.error` and read values with units
with :meth:`Plant.read_quantity`, so that every message has the same shape::

    plant.toml, line 12, key 'tags.TT-101.unit': ... .

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
import math
import re
import tomllib
from bisect import bisect_right
from dataclasses import dataclass, field
from pathlib import Path
from statistics import NormalDist

import numpy as np

from perftest import units as _units
from perftest.errors import InputError, PlantFileError, UnitError

__all__ = [
    "load_plant",
    "Plant",
    "SiteSettings",
    "TagSpec",
    "GroupSpec",
    "UncertaintySpec",
    "StabilityLimit",
    "DEFAULT_STABILITY",
    "KNOWN_SECTIONS",
]

#: Top-level tables of a plant file.  The first four are validated here.
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

_STANDARD_ATMOSPHERE = 101325.0  # [Pa], by definition (NIST SP 811, B.8)


# ---------------------------------------------------------------------------
# result objects


@dataclass(frozen=True)
class UncertaintySpec:
    """Systematic uncertainty of an instrument as stated by its maker or calibration.

    Attributes
    ----------
    value : float
        Stated value: in the tag's unit (``absolute``) or in percent.
    kind : str
        ``"absolute"``, ``"percent_of_reading"`` or ``"percent_of_span"``.
    level : float or str
        Coverage probability it was stated at (``0.95``) or ``"standard"``.
    k : float or None
        Coverage factor written in the file (e.g. ``2`` from a calibration
        certificate); overrides the one derived from ``level``.
    """

    value: float
    kind: str
    level: float | str = 0.95
    k: float | None = None

    @property
    def coverage_factor(self) -> float:
        """Divisor from the stated to the standard uncertainty.

        Notes
        -----
        A level ``p`` is read as a normal distribution with infinite degrees of
        freedom: :math:`k = \\Phi^{-1}((1 + p)/2)`, so 95 % gives 1.960 (JCGM 100:2008,
        G.1.3 and Table G.1).  Certificates that state ``k = 2`` for "about 95 %"
        should write ``k = 2``: dividing by 1.96 instead would overstate the standard
        uncertainty by 2 %.
        """
        if self.k is not None:
            return float(self.k)
        if self.level == "standard":
            return 1.0
        return NormalDist().inv_cdf(0.5 + float(self.level) / 2.0)


@dataclass(frozen=True)
class StabilityLimit:
    """Permissible variation of a reading about its window mean.

    Attributes
    ----------
    value : float
        As written: percent of the mean, or an interval in ``unit``.
    kind : str
        ``"percent"`` or ``"absolute"``.
    unit : str or None
        Unit of an absolute value.
    value_si : float
        Absolute value converted to SI as an interval (for ``percent``: the
        fraction, ``value / 100``).
    """

    value: float
    kind: str
    unit: str | None = None
    value_si: float = 0.0

    def limit_si(self, mean_si):
        """Permissible variation [SI] for a window mean [SI] (scalar or array)."""
        if self.kind == "percent":
            return np.abs(mean_si) * self.value_si
        return self.value_si + 0.0 * np.asarray(mean_si, dtype=float)


def _default_stability() -> dict[str, StabilityLimit]:
    # Common practice, no source: permissible variations a performance engineer
    # typically accepts over a steady test window.  Override per quantity with
    # [stability.<quantity>] or per tag with `stability`.
    pct = {
        "pressure": 1.0,
        "mass_flow": 2.0,
        "volume_flow": 2.0,
        "power": 1.0,
        "heat_flow": 2.0,
        "frequency": 0.5,
        "speed": 0.5,
    }
    out = {q: StabilityLimit(v, "percent", None, v / 100.0) for q, v in pct.items()}
    out["temperature"] = StabilityLimit(0.5, "absolute", "K", 0.5)
    out["temperature_difference"] = StabilityLimit(0.5, "absolute", "K", 0.5)
    return out


#: Default permissible variation per quantity (common practice, no source).
DEFAULT_STABILITY: dict[str, StabilityLimit] = _default_stability()


@dataclass(frozen=True)
class SiteSettings:
    """The ``[site]`` table.

    Attributes
    ----------
    name : str
    timezone : str
        IANA zone of timestamps without offset.
    atmospheric_pressure : float or None
        Fixed reference for gauge pressures [Pa].
    barometer_tag : str or None
        Logged absolute-pressure tag used instead, sample by sample.
    dead_state_temperature : float or None
        [K]
    dead_state_temperature_tag : str or None
    dead_state_pressure : float or None
        [Pa]; 101325 Pa when neither it nor its tag is given.
    dead_state_pressure_tag : str or None
    """

    name: str
    timezone: str = "UTC"
    atmospheric_pressure: float | None = None
    barometer_tag: str | None = None
    dead_state_temperature: float | None = None
    dead_state_temperature_tag: str | None = None
    dead_state_pressure: float | None = _STANDARD_ATMOSPHERE
    dead_state_pressure_tag: str | None = None


@dataclass(frozen=True)
class TagSpec:
    """One logged instrument (``[tags.<ID>]``).

    Attributes
    ----------
    id, column, quantity : str
    unit : str or None
        Unit as logged; None when the run file carries a units row.
    description : str
    uncertainty : UncertaintySpec or None
    span : tuple(float, float) or None
        Calibrated range in the tag's unit.
    calibration : tuple of float or None
        Polynomial coefficients, ascending powers, in the tag's unit.
    shared_calibration : str or None
        Calibration lot: systematic errors within a lot are fully correlated.
    density : float or None
        [kg/m3] for a volume-flow unit converted to mass flow.
    stability : StabilityLimit or None
        Per-tag override of the permissible variation.
    source : str or None
        File stem the column must come from.
    sentinels : tuple
        Extra values (numbers or texts) that mean "bad sample".
    """

    id: str
    column: str
    quantity: str
    unit: str | None = None
    description: str = ""
    uncertainty: UncertaintySpec | None = None
    span: tuple[float, float] | None = None
    calibration: tuple[float, ...] | None = None
    shared_calibration: str | None = None
    density: float | None = None
    stability: StabilityLimit | None = None
    source: str | None = None
    sentinels: tuple = ()

    def _unit_for(self, unit, what: str) -> str:
        unit = unit if unit is not None else self.unit
        if unit is None:
            raise InputError(
                f"Tag {self.id!r} has no unit in the plant file, so {what} cannot be "
                "converted. Pass unit= (the unit of the run file) or set the tag's unit.",
                tag=self.id,
                parameter="unit",
            )
        return unit

    def systematic_standard_uncertainty(self, mean_si, *, atmospheric_pressure=None, unit=None):
        """Systematic standard uncertainty of the tag's reading [SI].

        Parameters
        ----------
        mean_si : float or array_like
            Mean reading [SI] (used by ``percent_of_reading``).
        atmospheric_pressure : float or array_like, optional
            [Pa], needed for ``percent_of_reading`` of a gauge-pressure tag: the
            percentage applies to the gauge reading.
        unit : str, optional
            Unit of the run file when the plant file gives none.

        Returns
        -------
        float or ndarray
            Standard uncertainty [SI]; 0 when the tag states no uncertainty.

        Notes
        -----
        .. math:: u = U / k, \\quad U = \\begin{cases} a & \\text{absolute} \\\\
                  |\\bar x|\\,p/100 & \\text{percent of reading} \\\\
                  (x_{hi} - x_{lo})\\,p/100 & \\text{percent of span} \\end{cases}

        with :math:`\\bar x` the mean in the tag's unit and :math:`k` the coverage
        factor of the stated level (:attr:`UncertaintySpec.coverage_factor`).
        The interval is converted to SI without offset (``difference=True``).

        References
        ----------
        JCGM 100:2008, "Evaluation of measurement data - Guide to the expression of
        uncertainty in measurement", 4.3.3 (expanded to standard uncertainty).
        """
        spec = self.uncertainty
        if spec is None:
            return 0.0 * np.asarray(mean_si, dtype=float) + 0.0
        unit = self._unit_for(unit, "its uncertainty")
        if spec.kind == "absolute":
            stated = spec.value
        elif spec.kind == "percent_of_span":
            stated = (self.span[1] - self.span[0]) * spec.value / 100.0
        else:
            reading = _units.from_si(
                mean_si,
                unit,
                quantity=self.quantity,
                atmospheric_pressure=atmospheric_pressure,
                density=self._density_for(unit),
            )
            stated = np.abs(reading) * spec.value / 100.0
        u = _units.to_si(
            stated,
            unit,
            quantity=self.quantity,
            density=self._density_for(unit),
            difference=True,
        )
        return u / spec.coverage_factor

    def _density_for(self, unit):
        spec = _units.parse_unit(unit)
        if spec.density_exponent == 1 and self.quantity == "volume_flow":
            return None
        return self.density if spec.needs_density else None

    def apply_calibration(self, values_in_tag_unit):
        """Apply the calibration polynomial, in the tag's own unit.

        .. math:: x_{corr} = c_0 + c_1 x + c_2 x^2 + \\dots

        A Series keeps its index; without a calibration the values come back
        unchanged (a copy for arrays).
        """
        if self.calibration is None:
            if hasattr(values_in_tag_unit, "copy"):
                return values_in_tag_unit.copy()
            return values_in_tag_unit
        x = np.asarray(values_in_tag_unit, dtype=float)
        # Horner's scheme: one multiply-add per coefficient
        out = np.full_like(x, self.calibration[-1], dtype=float)
        for c in self.calibration[-2::-1]:
            out = out * x + c
        if hasattr(values_in_tag_unit, "index") and getattr(values_in_tag_unit, "ndim", 0) == 1:
            import pandas as pd

            return pd.Series(out, index=values_in_tag_unit.index, name=values_in_tag_unit.name)
        return float(out) if out.ndim == 0 else out


@dataclass(frozen=True)
class GroupSpec:
    """Redundant instruments averaged into one value (``[groups.<ID>]``).

    Attributes
    ----------
    id : str
    tags : tuple of str
        Member tag ids (at least two, same quantity).
    quantity : str
    agreement : StabilityLimit or None
        Largest permitted difference between member means.
    description : str
    """

    id: str
    tags: tuple[str, ...]
    quantity: str
    agreement: StabilityLimit | None = None
    description: str = ""


@dataclass(frozen=True)
class Plant:
    """A validated plant file.

    Attributes
    ----------
    path : pathlib.Path
    name : str
    site : SiteSettings
    tags : dict[str, TagSpec]
    groups : dict[str, GroupSpec]
    stability : dict[str, StabilityLimit]
        Defaults (:data:`DEFAULT_STABILITY`) overridden by ``[stability]``.
    sections : dict
        Raw tables ``streams``, ``units``, ``fuel``, ``performance``, ``reference``
        (dicts) and ``corrections``, ``guarantees`` (lists); empty when absent.
    text : str
        The file text.
    """

    path: Path
    name: str
    site: SiteSettings
    tags: dict[str, TagSpec]
    groups: dict[str, GroupSpec]
    stability: dict[str, StabilityLimit]
    sections: dict
    text: str = field(repr=False)
    _lines: dict = field(default_factory=dict, repr=False, compare=False)

    def locate(self, *keys) -> int | None:
        """Line number (1-based) of a key path, e.g. ``locate("tags", "TT-101", "unit")``.

        Array-of-table entries are addressed by index: ``locate("guarantees", 0,
        "value")``.  A single dotted string is split at dots when it is not a key
        itself.  When the key itself is not written, the line of its nearest
        written parent is returned; None when nothing matches.
        """
        return _locate(self._lines, keys)

    def error(self, message: str, *keys) -> PlantFileError:
        """Build (not raise) a :class:`PlantFileError` located at ``keys``.

        The message gets the prefix ``"plant.toml, line 12, key 'streams.main.fluid': "``
        and the error's ``file``, ``line``, ``key`` (and ``tag``) fields are set.
        """
        return _make_error(self.path, self._lines, message, keys)

    def read_quantity(self, value, quantity: str, *keys, default_unit=None, difference=False):
        """Read ``{ value, unit }`` or a bare number (in ``default_unit``) as SI.

        Parameters
        ----------
        value : dict or number
            The TOML value.
        quantity : str
            Glossary quantity it must be.
        *keys
            Where it is written (for messages).
        default_unit : str, optional
            Unit of a bare number; without it a bare number is an error.
        difference : bool
            True for intervals (no offset, no gauge shift).

        Returns
        -------
        float
            SI value.  Gauge units use ``site.atmospheric_pressure``.

        Raises
        ------
        PlantFileError
        """
        return _read_quantity(
            self.path,
            self._lines,
            value,
            quantity,
            keys,
            default_unit=default_unit,
            difference=difference,
            atmospheric_pressure=self.site.atmospheric_pressure,
        )

    def quantity_of(self, name: str) -> str:
        """Quantity of a tag or group id (KeyError when it is neither)."""
        if name in self.tags:
            return self.tags[name].quantity
        return self.groups[name].quantity

    def is_measured(self, name: str) -> bool:
        """True when ``name`` is a tag or group id."""
        return name in self.tags or name in self.groups

    @property
    def tags_without_uncertainty(self) -> tuple[str, ...]:
        """Tag ids whose systematic uncertainty is not stated (taken as 0)."""
        return tuple(t for t, s in self.tags.items() if s.uncertainty is None)

    def __repr__(self) -> str:
        from perftest.display.views import plant_text

        return plant_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import plant_html

        return plant_html(self)


# ---------------------------------------------------------------------------
# locating keys in the text

_BARE = re.compile(r"[A-Za-z0-9_-]+")


class _Scanner:
    """Walk valid TOML text and record the line of every key path.

    tomllib has already checked the syntax, so this only needs to follow the
    structure: headers, dotted keys, strings, inline tables and arrays.
    """

    def __init__(self, text: str):
        self.s = text
        self.i = 0
        self.n = len(text)
        self.newlines = [m.start() for m in re.finditer("\n", text)]
        self.lines: dict[tuple, int] = {}
        self.array_counts: dict[tuple, int] = {}

    def line(self, pos: int) -> int:
        return bisect_right(self.newlines, pos - 1) + 1

    def record(self, path: tuple, pos: int) -> None:
        self.lines.setdefault(path, self.line(pos))

    def skip_ws(self, newlines: bool) -> None:
        s = self.s
        while self.i < self.n:
            c = s[self.i]
            if c in " \t\r" or (newlines and c == "\n"):
                self.i += 1
            elif c == "#":
                while self.i < self.n and s[self.i] != "\n":
                    self.i += 1
            else:
                break

    def read_string(self) -> str:
        s, i = self.s, self.i
        for quote in ('"""', "'''"):
            if s.startswith(quote, i):
                end = s.find(quote, i + 3)
                while quote == '"""' and end > 0 and _escaped(s, end):
                    end = s.find(quote, end + 1)
                # up to two extra quotes may belong to the content
                while s.startswith(quote[0], end + 3):
                    end += 1
                self.i = end + 3
                return s[i + 3 : end]
        q = s[i]
        j = i + 1
        out = []
        while j < self.n and s[j] != q:
            if q == '"' and s[j] == "\\":
                out.append(s[j : j + 2])
                j += 2
                continue
            out.append(s[j])
            j += 1
        self.i = j + 1
        raw = "".join(out)
        if q == '"':
            try:
                return tomllib.loads(f"k = {s[i : j + 1]}")["k"]
            except tomllib.TOMLDecodeError:
                return raw
        return raw

    def read_key(self) -> tuple:
        parts = []
        while True:
            self.skip_ws(False)
            if self.s[self.i] in "\"'":
                parts.append(self.read_string())
            else:
                m = _BARE.match(self.s, self.i)
                if not m:
                    break
                parts.append(m.group(0))
                self.i = m.end()
            self.skip_ws(False)
            if self.i < self.n and self.s[self.i] == ".":
                self.i += 1
                continue
            break
        return tuple(parts)

    def read_value(self, path: tuple) -> None:
        self.skip_ws(False)
        c = self.s[self.i]
        if c in "\"'":
            self.read_string()
        elif c == "{":
            self.i += 1
            while True:
                self.skip_ws(False)
                if self.s[self.i] == "}":
                    self.i += 1
                    return
                if self.s[self.i] == ",":
                    self.i += 1
                    continue
                start = self.i
                key = self.read_key()
                self.record(path + key, start)
                self.skip_ws(False)
                self.i += 1  # '='
                self.read_value(path + key)
        elif c == "[":
            self.i += 1
            index = 0
            while True:
                self.skip_ws(True)
                if self.s[self.i] == "]":
                    self.i += 1
                    return
                if self.s[self.i] == ",":
                    self.i += 1
                    continue
                self.record(path + (index,), self.i)
                self.read_value(path + (index,))
                index += 1
        else:
            while self.i < self.n and self.s[self.i] not in ",]}\n#":
                self.i += 1

    def resolve(self, key: tuple) -> tuple:
        """Insert the current index after every array-of-tables part of a header key.

        ``[items.extra]`` after the second ``[[items]]`` is ``("items", 1, "extra")``.
        """
        out: tuple = ()
        for part in key[:-1]:
            out += (part,)
            count = self.array_counts.get(out)
            if count:
                out += (count - 1,)
        return out + key[-1:]

    def run(self) -> dict:
        table: tuple = ()
        s = self.s
        while True:
            self.skip_ws(True)
            if self.i >= self.n:
                break
            start = self.i
            if s.startswith("[[", self.i):
                self.i += 2
                key = self.resolve(self.read_key())
                index = self.array_counts.get(key, 0)
                self.array_counts[key] = index + 1
                table = key + (index,)
                for k in range(1, len(table) + 1):
                    self.record(table[:k], start)
                self.i = s.index("]]", self.i) + 2
            elif s[self.i] == "[":
                self.i += 1
                key = self.resolve(self.read_key())
                table = key
                for k in range(1, len(key) + 1):
                    self.record(key[:k], start)
                self.i = s.index("]", self.i) + 1
            else:
                key = self.read_key()
                if not key:  # cannot happen in valid TOML; move on rather than loop
                    self.i = s.find("\n", self.i) % (self.n + 1) + 1
                    continue
                for k in range(1, len(key) + 1):
                    self.record(table + key[:k], start)
                self.skip_ws(False)
                self.i += 1  # '='
                self.read_value(table + key)
        return self.lines


def _escaped(s: str, pos: int) -> bool:
    n = 0
    while pos - 1 - n >= 0 and s[pos - 1 - n] == "\\":
        n += 1
    return n % 2 == 1


def _scan_lines(text: str) -> dict:
    try:
        return _Scanner(text).run()
    except (IndexError, ValueError):
        # the scanner only serves messages; never let it hide the real problem
        return {}


def _locate(lines: dict, keys) -> int | None:
    keys = tuple(keys)
    if len(keys) == 1 and isinstance(keys[0], str) and keys[0] not in {k[0] for k in lines}:
        keys = tuple(keys[0].split("."))
    for k in range(len(keys), 0, -1):
        line = lines.get(keys[:k])
        if line is not None:
            return line
    return None


def _dotted(keys) -> str:
    out = ""
    for k in keys:
        if isinstance(k, int):
            out += f"[{k}]"
        else:
            part = k if _BARE.fullmatch(k) else f'"{k}"'
            out += ("." if out else "") + part
    return out


def _make_error(path: Path, lines: dict, message: str, keys) -> PlantFileError:
    keys = tuple(keys)
    line = _locate(lines, keys) if keys else None
    where = path.name
    if line is not None:
        where += f", line {line}"
    dotted = _dotted(keys) if keys else None
    if dotted:
        where += f", key {dotted!r}"
    tag = keys[1] if len(keys) > 1 and keys[0] == "tags" else None
    return PlantFileError(f"{where}: {message}", file=path, line=line, key=dotted, tag=tag)


# ---------------------------------------------------------------------------
# reading values


def _is_number(v) -> bool:
    return isinstance(v, int | float) and not isinstance(v, bool) and math.isfinite(v)


def _type_name(v) -> str:
    return {dict: "a table", list: "an array", str: "a text", bool: "a boolean"}.get(
        type(v), f"{type(v).__name__} {v!r}"
    )


def _read_quantity(
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
        raise err(
            f"must be a {quantity} with its unit, written {example}. Got {_type_name(value)}."
        )
    if not _is_number(number):
        raise err(f"must be a finite number. Got {_type_name(number)}.", *where)
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

    def check_keys(self, table: dict, known, *keys, what: str) -> None:
        for k in table:
            if k not in known:
                near = difflib.get_close_matches(k, known, n=1, cutoff=0.6)
                hint = f" Did you mean {near[0]!r}?" if near else ""
                raise self.error(
                    f"unknown key {k!r} in {what}.{hint} Known keys: {', '.join(known)}.",
                    *keys,
                    k,
                )

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
        for k in self.data:
            if k not in KNOWN_SECTIONS:
                near = difflib.get_close_matches(k, KNOWN_SECTIONS, n=1, cutoff=0.6)
                hint = f" Did you mean {near[0]!r}?" if near else ""
                raise self.error(
                    f"unknown top-level table {k!r}.{hint} "
                    f"Known tables: {', '.join(KNOWN_SECTIONS)}.",
                    k,
                )
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
        self.check_keys(raw, _SITE_KEYS, "site", what="[site]")
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
        self.check_keys(raw, _TAG_KEYS, *k0, what=f"tag {tid!r}")
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
        self.check_keys(raw, _UNCERTAINTY_KEYS, *keys, what="an uncertainty")
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
        self.check_keys(raw, _LIMIT_KEYS, *keys, what="a permissible variation")
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
        self.check_keys(raw, _GROUP_KEYS, *k0, what=f"group {gid!r}")
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


def load_plant(path) -> Plant:
    """Read and validate a plant file.

    Parameters
    ----------
    path : str or os.PathLike
        The TOML file (schema: docs/plant-file.md).

    Returns
    -------
    Plant

    Raises
    ------
    PlantFileError
        Missing file, TOML syntax error (with tomllib's line and column), or an
        invalid key; the message names the file, line and dotted key and says
        what to write instead.

    Notes
    -----
    Sections ``streams``, ``units``, ``fuel``, ``performance``, ``corrections``,
    ``guarantees`` and ``reference`` are kept raw for the modules that own them.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
        # a UTF-8 byte order mark (written by some Windows editors) carries no data
        text = text.removeprefix("\ufeff")
    except FileNotFoundError:
        raise PlantFileError(
            f"{path}: the plant file does not exist. Check the path "
            f"(working directory: {Path.cwd()}).",
            file=path,
        ) from None
    except IsADirectoryError:
        raise PlantFileError(
            f"{path}: is a directory; give the plant .toml file.", file=path
        ) from None
    except UnicodeDecodeError as exc:
        raise PlantFileError(
            f"{path}: the plant file is not UTF-8 text ({exc.reason} at byte {exc.start}). "
            "Save it as UTF-8.",
            file=path,
        ) from None
    if not re.sub(r"(?m)#.*$", "", text).strip():
        raise PlantFileError(
            f"{path}: the plant file is empty (no [site], [tags] or other table). Write "
            "the plant description there (see docs/plant-file.md) or give the right file.",
            file=path,
        )
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"\(at line (\d+), column (\d+)\)", str(exc))
        line = int(m.group(1)) if m else None
        reason = re.sub(r"\s*\(at line \d+, column \d+\)", "", str(exc))
        where = f", line {line}, column {m.group(2)}" if m else ""
        raise PlantFileError(
            f"{path.name}{where}: not valid TOML: {reason}. Fix the syntax there "
            "(strings in double quotes, one key = value per line, tables as [name]).",
            file=path,
            line=line,
        ) from None
    return _Loader(path, text, data).load()
