"""The plant file: one TOML file that describes a plant (docs/plant-file.md).

:func:`load_plant` reads the file, parses it as TOML (data only: no expressions)
and hands the tables to :mod:`perftest.plant.loader`.  The work is split by
concept:

* :mod:`perftest.plant.schema`: which sections and keys a plant file may hold,
  checked by :mod:`perftest.plant.checks` and rendered into docs/plant-file.md by
  :mod:`perftest.plant.keydocs`;
* :mod:`perftest.plant.scanner`: the line of every key, for messages;
* :mod:`perftest.plant.values`: numbers and values with units read into SI;
* :mod:`perftest.plant.records`: :class:`Plant`, :class:`TagSpec`,
  :class:`GroupSpec` and the other records;
* :mod:`perftest.plant.loader`: validation and building of those records.

The names other modules use are importable from here.
"""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

from perftest.errors import PlantFileError
from perftest.plant.loader import build_plant
from perftest.plant.records import (
    DEFAULT_STABILITY,
    GroupSpec,
    Plant,
    SiteSettings,
    StabilityLimit,
    TagSpec,
    UncertaintySpec,
)
from perftest.plant.scanner import MAX_NESTING, nesting_problem
from perftest.plant.schema import KNOWN_SECTIONS

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
        Missing or unreadable file, TOML syntax error (with tomllib's line and column), or an
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
    except OSError as exc:  # no permission, a broken link, a device error ...
        raise PlantFileError(
            f"{path}: the plant file cannot be read ({exc.strerror or exc}). Check the "
            "path and the file's permissions.",
            file=path,
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
    problem = nesting_problem(text)
    if problem is not None:
        line, what = problem
        raise PlantFileError(
            f"{path.name}, line {line}: {what}; a plant file needs a few levels at most "
            f"(limit {MAX_NESTING}). Check the brackets and dots on that line.",
            file=path,
            line=line,
        )
    try:
        data = tomllib.loads(text)
    except RecursionError:
        # the check above should make this unreachable; never let it escape as such
        raise PlantFileError(
            f"{path.name}: arrays or tables nested too deeply to read. A plant file needs "
            "a few levels at most; check the brackets.",
            file=path,
        ) from None
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
    return build_plant(path, text, data)
