"""Random flow networks for the balance tests (invented numbers).

Each stream leaves one node and enters another, with a coefficient of one or a
random one on its leaving side; some streams are unmeasured (observable or not),
the weights are equal or not.
"""

from __future__ import annotations

import numpy as np


def random_flow_network(rng, max_nodes: int, extra_unmeasured: int):
    """``(A, un, me, u, x)``: the incidence matrix A (nodes x streams), the unmeasured
    and measured streams, the measured streams' standard uncertainties and values.

    2 to ``max_nodes - 1`` nodes, 1 to ``nodes + extra_unmeasured - 1`` unmeasured
    streams (fewer than all streams)."""
    m = int(rng.integers(2, max_nodes))
    ns = int(rng.integers(m + 1, 3 * m + 3))
    A = np.zeros((m, ns))
    for j in range(ns):
        a, b = rng.choice(m, 2, replace=False)
        A[a, j], A[b, j] = rng.choice([1.0, rng.uniform(0.5, 2.0)]), -1.0
    k = int(rng.integers(1, min(ns - 1, m + extra_unmeasured)))
    un = rng.choice(ns, k, replace=False)
    me = np.setdiff1d(np.arange(ns), un)
    u = np.ones(me.size) if rng.random() < 0.5 else rng.uniform(0.5, 2.0, me.size)
    x = rng.uniform(10.0, 100.0, me.size)
    return A, un, me, u, x
