"""The key tables of docs/plant-file.md, rendered from :mod:`perftest.plant.schema`.

docs/plant-file.md marks each generated table::

    <!-- keys: performance -->
    | key | ... |
    <!-- /keys -->

:func:`render_docs` replaces what lies between the marks with :func:`key_table` of
the named table (:data:`~perftest.plant.schema.KEY_TABLES`); the prose around them
is left alone.  After a change of the schema, rewrite the page with::

    python -m perftest.plant.keydocs docs/plant-file.md

``--check`` only compares (exit status 1 when the page is out of date); the test
suite does the same, so page and schema cannot drift apart.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

from perftest.errors import InputError
from perftest.plant.schema import KEY_TABLES, Key, Table

__all__ = ["key_table", "render_docs", "update_docs"]

_MARK = re.compile(r"(<!-- keys: (\S+) -->\n)(.*?)(<!-- /keys -->)", re.DOTALL)
_ITEM_WORDS = {"number": "numbers", "text": "texts", "array": "arrays", "table": "tables"}


def _cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def value_label(key: Key) -> str:
    """The value column of one key: its TOML type(s), choices or inline-table keys."""
    if key.label:
        return key.label
    if key.choices:
        return " / ".join(f'`"{c}"`' for c in key.choices)
    parts = []
    for t in key.types:
        if t == "table" and key.fields is not None and key.fields.keys:
            parts.append("`{ " + ", ".join(k.name for k in key.fields.keys) + " }`")
        elif t == "table" and key.fields is not None and key.fields.entries is not None:
            entry = key.fields.entries
            parts.append(f"table of `{entry.name}` = {value_label(entry)}")
        elif t == "array" and key.items:
            items = " or ".join(_ITEM_WORDS.get(i, i) for i in key.items)
            if key.fields is not None and key.items == ("table",):
                items = "tables"
            parts.append(f"array of {items}")
        else:
            parts.append(t)
    return " or ".join(parts)


def _owners(only: tuple, universe: list) -> str:
    """``all``, the values named, or ``all but`` the few left out."""
    if not only:
        return "all"
    left_out = [u for u in universe if u not in only]
    if 2 * len(left_out) < len(only):
        return "all but " + ", ".join(f"`{o}`" for o in left_out)
    return ", ".join(f"`{o}`" for o in only)


def key_table(table: Table) -> str:
    """One Markdown table: key, (kinds or unit types,) value, default, meaning.

    Parameters
    ----------
    table : perftest.plant.schema.Table

    Returns
    -------
    str
        The table, one row per key, ending with a newline.
    """
    keys = table.keys if table.keys else (table.entries,)
    switched = table.switch is not None
    universe = sorted({o for k in keys for o in k.only})
    head = ["key", *(["for " + table.switch] if switched else []), "value", "default", "meaning"]
    lines = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    for k in keys:
        default = "required" if k.required else (k.default or "—")
        row = [f"`{k.name}`"]
        if switched:
            row.append(_owners(k.only, universe))
        row += [value_label(k), default, k.doc]
        lines.append("| " + " | ".join(_cell(c) for c in row) + " |")
    return "\n".join(lines) + "\n"


def render_docs(text: str) -> str:
    """``text`` with every marked key table rendered afresh from the schema.

    Raises
    ------
    InputError
        When a mark names no table of :data:`~perftest.plant.schema.KEY_TABLES`.
    """

    def one(m: re.Match) -> str:
        name = m.group(2)
        if name not in KEY_TABLES:
            raise InputError(
                f"The docs mark '<!-- keys: {name} -->' names no key table. "
                f"Use one of {', '.join(KEY_TABLES)}.",
                parameter="text",
            )
        return m.group(1) + key_table(KEY_TABLES[name]) + m.group(4)

    return _MARK.sub(one, text)


def marked_tables(text: str) -> list[str]:
    """Names of the key tables marked in ``text``, in order."""
    return [m.group(2) for m in _MARK.finditer(text)]


def update_docs(path, *, check: bool = False) -> bool:
    """Render the key tables of the page at ``path``; True when it was up to date.

    With ``check=True`` the file is not written.
    """
    path = Path(path)
    text = path.read_text(encoding="utf-8")
    new = render_docs(text)
    if new != text and not check:
        path.write_text(new, encoding="utf-8")
    return new == text


if __name__ == "__main__":  # pragma: no cover - exercised through update_docs
    args = sys.argv[1:]
    check = "--check" in args
    paths = [a for a in args if a != "--check"] or ["docs/plant-file.md"]
    stale = [p for p in paths if not update_docs(p, check=check)]
    if stale and check:
        sys.exit(f"out of date (run python -m perftest.plant.keydocs): {', '.join(stale)}")
