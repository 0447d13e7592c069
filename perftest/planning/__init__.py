"""Pre-test planning: the uncertainty a planned test will reach.

:mod:`~perftest.planning.design` reads the plant file's ``[design]`` table and the
planned instruments; :mod:`~perftest.planning.prediction` (:func:`plan`) predicts
each result's U95 with and without reconciliation, ranks the instruments by their
share and shows what upgrading one would gain;
:mod:`~perftest.planning.separability` finds the planned instruments whose gross
errors no measurement test can tell apart. Tables, Markdown and JSON of a plan are
written by :mod:`perftest.report.plan`.

May import: everything below it (errors, units, thermo, plant, run, balance,
evaluation).
"""

from perftest.planning.prediction import UncertaintyPlan, plan

__all__ = ["UncertaintyPlan", "plan"]
