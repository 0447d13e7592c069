"""Where a key is written in the plant file: line numbers for messages.

tomllib gives values but no positions, so :func:`scan_lines` walks the (already
valid) TOML text once and records the 1-based line of every key path, with
array-of-table entries addressed by index (``("guarantees", 0, "value")``).
:func:`located_error` turns a message and a key path into a
:class:`~perftest.errors.PlantFileError` of the house shape::

    plant.toml, line 12, key 'tags.TT-101.unit': ... .

The scanner only serves messages: on text it cannot follow it returns what it has,
never an error of its own.
"""

from __future__ import annotations

import re
import tomllib
from bisect import bisect_right
from pathlib import Path

from perftest.errors import PlantFileError

__all__ = ["scan_lines", "line_of", "dotted_key", "located_error", "nesting_problem", "MAX_NESTING"]

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


def scan_lines(text: str) -> dict:
    try:
        return _Scanner(text).run()
    except (IndexError, ValueError):
        # the scanner only serves messages; never let it hide the real problem
        return {}


def line_of(lines: dict, keys) -> int | None:
    keys = tuple(keys)
    if len(keys) == 1 and isinstance(keys[0], str) and keys[0] not in {k[0] for k in lines}:
        keys = tuple(keys[0].split("."))
    for k in range(len(keys), 0, -1):
        line = lines.get(keys[:k])
        if line is not None:
            return line
    return None


def dotted_key(keys) -> str:
    out = ""
    for k in keys:
        if isinstance(k, int):
            out += f"[{k}]"
        else:
            part = k if _BARE.fullmatch(k) else f'"{k}"'
            out += ("." if out else "") + part
    return out


def located_error(path: Path, lines: dict, message: str, keys) -> PlantFileError:
    keys = tuple(keys)
    line = line_of(lines, keys) if keys else None
    where = path.name
    if line is not None:
        where += f", line {line}"
    dotted = dotted_key(keys) if keys else None
    if dotted:
        where += f", key {dotted!r}"
    tag = keys[1] if len(keys) > 1 and keys[0] == "tags" else None
    return PlantFileError(f"{where}: {message}", file=path, line=line, key=dotted, tag=tag)


#: Deepest nesting a plant file may use: arrays and inline tables inside each other,
#: and parts of one dotted key.  The deepest in the documented format is 4 (a
#: correction surface's rows); 32 leaves room and keeps the parser, whose work grows
#: with the depth (recursion for brackets, the square of the length for dotted keys),
#: from being turned against the reader.
MAX_NESTING = 32

_NEST_TOKEN = re.compile(r"\"\"\"|'''|[\"'#\[\]{}.=,\n]")
_BASIC_STRING_END = re.compile(r'(?:[^"\\\n]|\\.)*"')


def nesting_problem(text: str, limit: int = MAX_NESTING) -> tuple[int, str] | None:
    """Line and description of nesting deeper than ``limit``, or None.

    One pass over the text, outside strings and comments: brackets ``[`` and ``{``
    count one level each; the dots of one dotted key (``a.b.c``) count one level per
    part.  Runs before the TOML parser; text it cannot follow (an unclosed string) is
    left for the parser to report.
    """
    depth = dots = 0
    pos = 0
    n = len(text)
    while pos < n:
        m = _NEST_TOKEN.search(text, pos)
        if m is None:
            return None
        tok, start = m.group(), m.start()
        pos = m.end()
        if tok in ('"""', "'''"):
            end = text.find(tok, pos)
            while tok == '"""' and end > 0 and _escaped(text, end):
                end = text.find(tok, end + 1)
            if end < 0:
                return None
            pos = end + 3
        elif tok == '"':
            s = _BASIC_STRING_END.match(text, pos)
            if s is None:
                return None
            pos = s.end()
        elif tok == "'":
            end = text.find("'", pos)
            if end < 0:
                return None
            pos = end + 1
        elif tok == "#":
            end = text.find("\n", pos)
            pos = n if end < 0 else end
        elif tok in "[{":
            depth += 1
            dots = 0
            if depth > limit:
                line = text.count("\n", 0, start) + 1
                return line, f"arrays or inline tables nested more than {limit} levels deep"
        elif tok in "]}":
            depth = max(depth - 1, 0)
            dots = 0
        elif tok == ".":
            dots += 1
            if dots >= limit:
                line = text.count("\n", 0, start) + 1
                return line, f"a dotted key of more than {limit} parts"
        else:  # = , newline: a new key or value begins
            dots = 0
    return None
