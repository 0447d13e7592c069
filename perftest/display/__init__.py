"""Numbers and objects for people: display units, rounding, compact tables, reprs.

:mod:`perftest.display.format` formats numbers and converts to display units;
:mod:`perftest.display.views` builds the short text and HTML representations of the
pipeline objects (plant, measurements, reconciliation, performance, plan, windows
table).  The package imports only :mod:`perftest.errors` and :mod:`perftest.units`
(besides numpy and pandas), so every layer may call it.
"""

from __future__ import annotations

from perftest.display.format import *  # noqa: F403 - the formatting functions are the API
from perftest.display.format import __all__ as _format_all

__all__ = list(_format_all)
