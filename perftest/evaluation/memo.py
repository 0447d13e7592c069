"""Per-plant memo of the evaluation's work that depends on the plant file only.

:func:`~perftest.evaluation.results.evaluate` reads the same plant tables on every
call: the checked ``[performance]`` table, the fuel's heating value (an ISO 6976
sum for a composition), the correction curves and the guarantees.  A trend of many
windows calls it thousands of times with one plant, so those values are kept per
plant object and computed once.

Safety: an entry belongs to one plant object (held by a weak reference, so a new
object at a recycled ``id`` never finds it) and to the plant's contents at the time
it was made: a deep copy of ``plant.sections`` and the ``site`` settings are kept
beside it and compared with the plant's on every look-up.  A plant edited in place
(``plant.sections["performance"]["gross_power"] = ...``) no longer matches, and its
memo starts afresh.  Only values are kept, never errors: a step that raises is
computed again (and raises again) on the next call, so the errors and their order
are those of an evaluation without the memo.
"""

from __future__ import annotations

import copy
import datetime
import threading
import weakref
from collections import OrderedDict

__all__ = ["PlantMemo", "plant_memo", "clear"]

# Plants remembered at once: a process rarely evaluates more than a few plant files;
# the oldest entry goes first.
_MAX_PLANTS = 16

_LOCK = threading.Lock()
_MEMOS: OrderedDict[int, PlantMemo] = OrderedDict()


class PlantMemo:
    """Values computed from one plant object, keyed by the step that made them."""

    __slots__ = ("_ref", "_sections", "_site", "_path", "_values", "__weakref__")

    def __init__(self, plant, sections_copy, site, path):
        self._ref = weakref.ref(plant)
        self._sections = sections_copy
        self._site = site
        self._path = path
        self._values: dict = {}

    def matches(self, plant) -> bool:
        """True while ``plant`` is the object this memo was made for, unchanged."""
        try:
            return (
                self._ref() is plant
                and getattr(plant, "path", None) == self._path
                and getattr(plant, "site", None) == self._site
                and bool(plant.sections == self._sections)
            )
        except (TypeError, ValueError):  # contents that do not compare (arrays)
            return False

    def get(self, key, compute, *args):
        """The value of step ``key``: ``compute(*args)`` on the first call, then kept.

        ``compute`` must depend only on the plant (and on ``args`` named in ``key``);
        an exception it raises passes through and nothing is kept.
        """
        try:
            return self._values[key]
        except KeyError:
            pass
        value = compute(*args)
        self._values[key] = value
        return value

    def __contains__(self, key) -> bool:
        return key in self._values


# Values of TOML tables that cannot change in place (kept, not copied, by _tree_copy).
_IMMUTABLE = (str, int, float, bool, type(None), datetime.date, datetime.time, datetime.datetime)


def _tree_copy(value):
    """Deep copy of plain tables (dicts, lists, numbers, text): ``copy.deepcopy``'s
    result for them, a fraction of its cost; other objects go to ``copy.deepcopy``."""
    if isinstance(value, dict):
        return {k: _tree_copy(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_tree_copy(v) for v in value]
    if isinstance(value, _IMMUTABLE):
        return value
    return copy.deepcopy(value)


def plant_memo(plant) -> PlantMemo | None:
    """The memo of ``plant``, made (empty) on first use; None when it cannot be kept.

    A plant without a ``sections`` dict, one that cannot be weakly referenced or
    whose sections cannot be copied gets None: its evaluation computes every step.
    """
    sections = getattr(plant, "sections", None)
    if not isinstance(sections, dict):
        return None
    key = id(plant)
    with _LOCK:
        memo = _MEMOS.get(key)
        if memo is not None:
            if memo.matches(plant):
                _MEMOS.move_to_end(key)
                return memo
            del _MEMOS[key]
    try:
        memo = PlantMemo(
            plant,
            _tree_copy(sections),
            getattr(plant, "site", None),
            getattr(plant, "path", None),
        )
    except (TypeError, copy.Error, RecursionError):
        return None  # no weak reference, or sections that cannot be copied
    if not memo.matches(plant):  # e.g. arrays in the tables: == gives no verdict
        return None
    with _LOCK:
        _MEMOS[key] = memo
        while len(_MEMOS) > _MAX_PLANTS:
            _MEMOS.popitem(last=False)
    return memo


def clear() -> None:
    """Forget every plant's memo."""
    with _LOCK:
        _MEMOS.clear()
