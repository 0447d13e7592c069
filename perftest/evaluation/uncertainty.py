"""Propagation of uncertainty: linear (law of propagation) and Monte Carlo.

Inputs are summarised by their estimates ``x`` (n,) and covariance matrix ``cov``
(n, n) in SI units.  A measurement function maps the (n,) input vector to an (m,)
output vector (or a scalar).

* :func:`propagate` / :func:`propagate_linear`: the GUM law of propagation of
  uncertainty in matrix form, :math:`V_y = S V_x S^T`, with per-input budgets,
  Welch-Satterthwaite degrees of freedom and expanded uncertainties.
* :func:`monte_carlo`: propagation of distributions (GUM Supplement 1), seeded and
  deterministic, with shortest or probabilistically symmetric coverage intervals.
* :func:`expanded`, :func:`coverage_factor`: expanded uncertainty from Student's t.
* :func:`to_ufloats`: correlated ``uncertainties`` numbers for interactive work.

Linear propagation is exact for linear functions and a first-order approximation
otherwise: it is valid while the function is close to linear over a few standard
uncertainties of each input.  When in doubt, compare with :func:`monte_carlo`.

References
----------
.. [1] JCGM 100:2008, Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement (GUM), 2008. Clauses 5.1-5.2, Annex G.
.. [2] JCGM 101:2008, Evaluation of measurement data - Supplement 1 to the GUM -
   Propagation of distributions using a Monte Carlo method, 2008. Clauses 5.3, 7.
.. [3] JCGM 102:2011, Supplement 2 to the GUM - Extension to any number of output
   quantities, 2011. Clause 6.2 (matrix form of the law of propagation).

The work lives in three modules, re-exported here: :mod:`~perftest.evaluation.budgets`
(degrees of freedom, expanded uncertainty, ufloats), :mod:`~perftest.evaluation.propagation`
(linear propagation) and :mod:`~perftest.evaluation.montecarlo` (Monte Carlo).
"""

from perftest.evaluation.budgets import (
    DEFAULT_REL_STEP,
    coverage_factor,
    effective_dof,
    expanded,
    to_ufloats,
)
from perftest.evaluation.montecarlo import MonteCarlo, monte_carlo
from perftest.evaluation.propagation import Propagation, propagate, propagate_linear

__all__ = [
    "Propagation",
    "MonteCarlo",
    "propagate",
    "propagate_linear",
    "monte_carlo",
    "expanded",
    "coverage_factor",
    "effective_dof",
    "to_ufloats",
    "DEFAULT_REL_STEP",
]
