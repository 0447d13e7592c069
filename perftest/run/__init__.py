"""The run stage: a logged run and the work done on it before reconciliation.

:class:`Run` is the user's handle on a logged test (time-indexed SI data, the raw
text kept, a quality mask and an audit log); windows, the steady-state search,
stability checks, outlier screens and averaging to :class:`Measurements` are done
by the functions of this package's modules, which ``Run`` calls.

May import: :mod:`perftest.errors`, :mod:`perftest.units`, :mod:`perftest.plant`
(the tag descriptions). Nothing here reads files or writes reports.
"""

from perftest.run.core import Run
from perftest.run.measurements import MeasurementRecord, Measurements

__all__ = ["MeasurementRecord", "Measurements", "Run"]
