"""A stand-in for a plant reconciliation: serves values and a covariance.

Tests of the results layer use it so that they do not depend on the balance engine.
"""

from __future__ import annotations

import numpy as np

from perftest.errors import PerftestError


class StandIn:
    """Serves reconciled values and their covariance like PlantReconciliation.

    ``cov`` is a covariance matrix in the order of ``values``, or a dict of standard
    uncertainties (uncorrelated).
    """

    def __init__(self, values: dict, cov):
        self.names = list(values)
        self.x = np.array([values[n] for n in self.names], dtype=float)
        if isinstance(cov, dict):
            cov = np.diag([cov[n] ** 2 for n in self.names])
        self.cov = np.asarray(cov, dtype=float)
        self.dead_state = (288.15, 101325.0)
        self.model = None

    def value(self, name):
        if name not in self.names:
            raise PerftestError(f"unknown {name}")
        return float(self.x[self.names.index(name)])

    def covariance(self, names):
        idx = [self.names.index(n) for n in names]
        return self.cov[np.ix_(idx, idx)]
