"""Evaluation: the plant's figures from a reconciliation, with their uncertainty.

:mod:`~perftest.evaluation.results` (:func:`evaluate`, :class:`Performance`) computes
every summary result with u, U95 and its budget, using the published relations of
:mod:`~perftest.evaluation.performance` (efficiency, heat rate, Carnot bounds,
exergy), the propagation and Monte Carlo of :mod:`~perftest.evaluation.uncertainty`,
the correction curves and tables of :mod:`~perftest.evaluation.corrections` and
:mod:`~perftest.evaluation.correction_surface`, and the verdict rules of
:mod:`~perftest.evaluation.guarantees`.

May import: everything below it (errors, units, thermo, plant, run, balance).
"""

from perftest.evaluation.results import Performance, evaluate

__all__ = ["Performance", "evaluate"]
