"""Check a parsed plant file against its schema (:mod:`perftest.plant.schema`).

:func:`check_against_schema` walks the TOML tables once, before anything is built
from them, and refuses with a located :class:`~perftest.errors.PlantFileError`:

* a key the schema does not name, in any table, with the nearest known key
  ("Did you mean 'auxiliary_power'?");
* a key of another plant kind or unit type (``'cooling' is not a key of kind =
  "power"; it belongs to refrigeration``);
* a value of the wrong TOML type, or a text outside the key's choices, in
  ``fuel``, ``performance``, ``corrections`` and ``reference``.  The other sections
  check their values where they are read (the loader for ``site``, ``tags``,
  ``groups``, ``stability``; the model for ``streams``, ``units``; the guarantees
  and planning modules for ``guarantees``, ``acceptance``, ``design``), with
  messages that say more about the value;
* a ``[[corrections]]`` entry that corrects a result for a variable that another
  entry already corrects it for (the correction would be applied twice).

Choices are compared without regard to case (``basis = "LHV"`` reads as ``"lhv"``),
as the modules that read them do.
"""

from __future__ import annotations

import difflib
from collections.abc import Callable

from perftest.errors import PlantFileError
from perftest.plant.schema import PLANT_FILE, Key, Table
from perftest.plant.values import type_name

__all__ = ["check_against_schema"]

# sections whose values are checked where they are read (see the module docstring)
_VALUES_CHECKED_ELSEWHERE = (
    "site",
    "tags",
    "groups",
    "stability",
    "streams",
    "units",
    "guarantees",
    "acceptance",
    "design",
)

_TYPE_WORDS = {
    "text": "a text",
    "number": "a number",
    "boolean": "true or false",
    "array": "an array",
    "table": "a table",
}

ErrorFactory = Callable[..., PlantFileError]


def _toml_type(value) -> str:
    if isinstance(value, bool):
        return "boolean"
    if isinstance(value, int | float):
        return "number"
    if isinstance(value, str):
        return "text"
    if isinstance(value, list):
        return "array"
    if isinstance(value, dict):
        return "table"
    return "date/time"


def _hint(name: str, candidates) -> str:
    near = difflib.get_close_matches(str(name), list(candidates), n=1, cutoff=0.6)
    return f" Did you mean {near[0]!r}?" if near else ""


def check_against_schema(
    data: dict, error: ErrorFactory, line_of: Callable[..., int | None] | None = None
) -> None:
    """Refuse unknown keys, keys of another kind, wrong types and repeated corrections.

    Parameters
    ----------
    data : dict
        The parsed plant file.
    error : callable
        ``error(message, *keys) -> PlantFileError`` located at the key path.
    line_of : callable, optional
        ``line_of(*keys) -> int or None``, for messages that cite a second line.

    Raises
    ------
    PlantFileError
        At the first problem, naming the file, line and key.
    """
    for name, value in data.items():
        key = PLANT_FILE.key(name)
        if key is None:
            known = [k.name for k in PLANT_FILE.keys]
            raise error(
                f"unknown top-level table {name!r}.{_hint(name, known)} "
                f"Known tables: {', '.join(known)}.",
                name,
            )
        _Walk(error, name not in _VALUES_CHECKED_ELSEWHERE).value(value, key, (name,))
    _check_corrections_once(data, error, line_of)


class _Walk:
    def __init__(self, error: ErrorFactory, values: bool):
        self.error = error
        self.values = values  # check types and choices (else key names only)

    def value(self, value, key: Key, path: tuple, title: str = "") -> None:
        kind = _toml_type(value)
        if self.values and kind not in key.types:
            words = " or ".join(_TYPE_WORDS[t] for t in key.types)
            if len(path) == 1:  # a section
                words = f"a table [{path[0]}]"
                if key.types == ("array",):
                    words = f"an array of tables, written [[{path[0]}]]"
            raise self.error(f"must be {words}. Got {type_name(value)}.", *path)
        if self.values and key.choices and isinstance(value, str):
            if value.lower() not in key.choices:
                raise self.error(
                    f"{path[-1]!r} must be one of {', '.join(repr(c) for c in key.choices)}. "
                    f"Got {value!r}.{_hint(value.lower(), key.choices)}",
                    *path,
                )
        if kind == "table" and key.fields is not None:
            self.table(value, key.fields, path, title)
        elif kind == "array":
            for i, item in enumerate(value):
                self.item(item, key, (*path, i))

    def item(self, item, key: Key, path: tuple) -> None:
        kind = _toml_type(item)
        if self.values and key.items and kind not in key.items:
            if key.items == ("number",):
                raise self.error(f"must be a finite number. Got {type_name(item)}.", *path)
            words = " or ".join(_TYPE_WORDS[t] for t in key.items)
            raise self.error(f"must be {words}. Got {type_name(item)}.", *path)
        if kind == "table" and key.fields is not None:
            self.table(item, key.fields, path)

    def table(self, table: dict, schema: Table, path: tuple, title: str = "") -> None:
        if schema.entries is not None:
            entry = schema.entries
            name_of = entry.fields.title if entry.fields is not None else ""
            for name, value in table.items():
                # "a tag" -> "tag 'TT-101'", as messages name one entry
                what = f"{name_of.removeprefix('a ')} {name!r}" if name_of else ""
                self.value(value, entry, (*path, name), what)
            return
        title = title or schema.title
        if isinstance(path[-1], int):
            title += f" ({path[0]}[{path[-1]}])"
        if not schema.keys:
            for name in table:
                raise self.error(
                    f"{title} takes no keys; remove {name!r}. Reference conditions "
                    "belong to each [[corrections]] entry (reference = { value, unit }).",
                    *path,
                    name,
                )
        selected = self.selected(table, schema, path)
        applicable = [k.name for k in schema.keys if not k.only or selected in (None, *k.only)]
        for name, value in table.items():
            key = schema.key(name)
            if key is None:
                raise self.error(
                    f"unknown key {name!r} in {title}.{_hint(name, applicable)} "
                    f"Known keys: {', '.join(applicable)}.",
                    *path,
                    name,
                )
            if key.only and selected is not None and selected not in key.only:
                raise self.error(
                    f'{name!r} is not a key of {schema.switch} = "{selected}"; it belongs to '
                    f"{', '.join(key.only)}.{_hint(name, applicable)} Keys of "
                    f'{schema.switch} = "{selected}": {", ".join(applicable)}.',
                    *path,
                    name,
                )
            self.value(value, key, (*path, name))

    def selected(self, table: dict, schema: Table, path: tuple) -> str | None:
        """The value of the table's switch key, or None when there is none to go by."""
        if schema.switch is None:
            return None
        raw = table.get(schema.switch, schema.switch_default)
        if not isinstance(raw, str):
            return None
        switch = schema.key(schema.switch)
        if switch.choices:
            if raw.lower() not in switch.choices:
                self.value(raw, switch, (*path, schema.switch))  # raises with the choices
            return raw.lower()
        # a unit type: the model knows which types exist and says so when it is built
        owners = {o for k in schema.keys for o in k.only}
        return raw if raw in owners else None


def _check_corrections_once(data: dict, error: ErrorFactory, line_of) -> None:
    """One ``[[corrections]]`` entry of each kind per result and variable.

    Two multiplicative (or two additive) entries for one result and one variable
    would both be applied: the condition would be corrected for twice.  A curve and a
    surface of the same kind that share a variable do the same.  A multiplicative and
    an additive correction for one variable are two terms of
    ``measured = prod f_i(v_i) * R_ref + sum g_j(v_j)`` and are allowed.
    """
    entries = data.get("corrections")
    if not isinstance(entries, list):
        return
    seen: dict = {}
    for i, entry in enumerate(entries):
        if not isinstance(entry, dict) or not isinstance(entry.get("result"), str):
            continue
        result = entry["result"]
        kind = str(entry.get("kind", "multiplicative")).lower()
        for key in ("variable", "second_variable"):
            var = entry.get(key)
            if not isinstance(var, str):
                continue
            if (result, kind, var) in seen:
                j, jkey = seen[(result, kind, var)]
                line = line_of("corrections", j, jkey) if line_of else None
                at = f" at line {line}" if line else ""
                raise error(
                    f"corrects {result!r} for {var!r} a second time ({kind}): "
                    f"corrections[{j}]{at} already does, and both would be applied. Give one "
                    f"{kind} correction per result and variable: merge the two into one "
                    "curve or surface, or remove one.",
                    "corrections",
                    i,
                    key,
                )
            seen[(result, kind, var)] = (i, key)
