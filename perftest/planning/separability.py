"""Planned instruments whose gross errors no measurement test can tell apart.

A gross error is located by the measurement test: the measurement with the largest
normalised adjustment is the suspect.  Where two measurements enter the balances in
the same way (their columns of the constraint matrix, after the unmeasured variables
are eliminated, are proportional), their normalised adjustments are equal for any
data, so a gross error in one gives the other the same statistic: the test detects
it but cannot say which instrument it is in.  Two meters in series on one stream
with nothing else, or a flow meter and the two thermometers of a water circuit that
enters only one energy balance, are such sets.  After the test, elimination then has
to pick one by chance or drop them together (:mod:`perftest.balance.ambiguity`);
before the test, :func:`indistinguishable_sets` finds them from the design point so
that an instrument can be added or moved while it is still cheap.

The measure is the correlation of the adjustments at the design point,

.. math::

    \\rho_{ij} = \\frac{V_{ij}}{\\sqrt{V_{ii} V_{jj}}}, \\qquad
    V = \\Sigma - \\operatorname{Cov}(\\hat x),

(:math:`\\Sigma` the measurements' covariance, :math:`\\operatorname{Cov}(\\hat x)` the
reconciled one; :math:`V` is the covariance of the adjustments, whose diagonal
normalises the measurement test [1]_).  :math:`|\\rho_{ij}| = 1` exactly when the
reduced columns of :math:`i` and :math:`j` are proportional (for uncorrelated
measurements; with a shared calibration lot the correlation also carries it).

* **identical** sets: :math:`1 - |\\rho| \\le` ``TIE_RTOL`` for every pair; no test
  can ever tell the members apart.
* **near** sets: :math:`|\\rho| \\ge` :data:`NEAR_CORRELATION`, joined through any
  pair.  A gross error of expected statistic :math:`\\delta` in :math:`i` gives
  :math:`E[z_j] = |\\rho| \\delta`; the test prefers :math:`i` at 95 % only when
  :math:`(1 - |\\rho|)\\,\\delta > k \\sqrt{2 (1 - |\\rho|)}`, i.e.
  :math:`\\delta > k \\sqrt{2 / (1 - |\\rho|)}` (``separating_z``, with the set's
  smallest :math:`|\\rho|`: below it no pair of the set can be separated).  At
  :math:`|\\rho| = 0.99` that is a statistic of about 28, far beyond the gross errors
  a test is run to find.

References
----------
.. [1] S. Narasimhan, C. Jordache, "Data Reconciliation and Gross Error Detection",
   Gulf Publishing, 2000, Ch. 7 (measurement test and the covariance of the
   adjustments; from memory). DOI 10.1016/B978-088415255-2/50000-4
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from perftest.balance.ambiguity import SPREAD_K, TIE_RTOL
from perftest.balance.result import as_dense
from perftest.errors import InputError

__all__ = [
    "indistinguishable_sets",
    "adjustment_correlation",
    "describe_sets",
    "NEAR_CORRELATION",
    "SET_COLUMNS",
]

#: Correlation of the adjustments from which two instruments count as "near"
#: indistinguishable: separating them needs an expected statistic of
#: 1.96 sqrt(2 / 0.01) = 27.7, far beyond the gross errors a test is run to find
#: (a statistic of 4 to 6).  Common practice, no source: a planning threshold.
NEAR_CORRELATION = 0.99

#: Columns of the table :func:`indistinguishable_sets` returns.
SET_COLUMNS = ["set", "kind", "tags", "min_correlation", "separating_z"]


def _components(mask: np.ndarray) -> list[list[int]]:
    """Connected components (size >= 2) of the graph with adjacency ``mask``."""
    n = mask.shape[0]
    seen = np.zeros(n, dtype=bool)
    out = []
    for start in range(n):
        if seen[start]:
            continue
        stack, comp = [start], []
        seen[start] = True
        while stack:
            i = stack.pop()
            comp.append(i)
            for j in np.flatnonzero(mask[i] & ~seen):
                seen[j] = True
                stack.append(int(j))
        if len(comp) > 1:
            out.append(sorted(comp))
    return out


def adjustment_correlation(result) -> tuple[np.ndarray, np.ndarray]:
    """|correlation| of the adjustments and which measurements are testable.

    Returns
    -------
    rho : ndarray (n, n)
        :math:`|\\rho_{ij}|`, 0 where either adjustment has no variance.
    testable : ndarray of bool (n,)
        Redundant measurements with an adjustment variance above round-off.
    """
    S = as_dense(result.cov_measured)
    V = S - as_dense(result.x_cov)
    d = np.clip(np.diag(V), 0.0, None)
    # an adjustment variance below 1e-12 of the measurement's variance is round-off
    testable = np.asarray(result.redundant, dtype=bool) & (d > 1e-12 * np.diag(S))
    sd = np.sqrt(d)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.abs(V) / np.outer(sd, sd)
    rho[~testable, :] = 0.0
    rho[:, ~testable] = 0.0
    return np.clip(np.nan_to_num(rho), 0.0, 1.0), testable


def indistinguishable_sets(rec, *, near: float = NEAR_CORRELATION) -> pd.DataFrame:
    """Sets of measurements whose measurement-test statistics cannot be told apart.

    Parameters
    ----------
    rec : perftest.balance.plant.PlantReconciliation
        A reconciliation at the design point (or of any window).
    near : float, default :data:`NEAR_CORRELATION`
        Correlation of the adjustments from which a pair counts as near (0 < near < 1).

    Raises
    ------
    InputError
        ``near`` is not between 0 and 1.

    Returns
    -------
    DataFrame
        Columns :data:`SET_COLUMNS`: ``set`` (1, 2, ...), ``kind`` ("identical" or
        "near"), ``tags`` (tuple of tag or group ids, in the reconciliation's order),
        ``min_correlation`` (smallest :math:`|\\rho|` of a pair in the set) and
        ``separating_z`` (the expected measurement-test statistic a gross error must
        reach before the test can prefer one member; inf for identical sets).
        Identical sets come first; a near set may contain an identical one.  A set
        with at most one member that is not trusted (``rec.trusted``: the plant file's
        ``trusted = true``) is left out: elimination then knows which one to drop.
    """
    if not (isinstance(near, int | float) and 0.0 < near < 1.0):
        raise InputError(
            f"The 'near' parameter of indistinguishable_sets must be a number between 0 and "
            f"1. Got {near!r}.",
            parameter="near",
        )
    result = rec.result
    tags = list(rec.solver_tags)
    rho, testable = adjustment_correlation(result)
    n = len(tags)
    off = ~np.eye(n, dtype=bool)
    exact = _components((1.0 - rho <= TIE_RTOL) & off)
    close = _components((rho >= near) & off)
    rows = []

    trusted = set(getattr(rec, "trusted", ()) or ())

    def add(kind, members):
        if sum(tags[i] not in trusted for i in members) <= 1:
            return
        sub = rho[np.ix_(members, members)]
        lo = float(sub[~np.eye(len(members), dtype=bool)].min())
        gap = 1.0 - lo
        z = math.inf if gap <= TIE_RTOL else SPREAD_K * math.sqrt(2.0 / gap)
        rows.append(
            dict(
                set=len(rows) + 1,
                kind=kind,
                tags=tuple(tags[i] for i in members),
                min_correlation=lo,
                separating_z=z,
            )
        )

    for members in exact:
        add("identical", members)
    for members in close:
        if members not in exact:
            add("near", members)
    return pd.DataFrame(rows, columns=SET_COLUMNS)


def describe_sets(sets: pd.DataFrame) -> str:
    """One sentence per kind for a warning or a note ('' when there are none)."""
    parts = []
    ident = sets[sets["kind"] == "identical"]
    if len(ident):
        parts.append(
            "The planned instruments hold sets that no measurement test can tell apart "
            "(they enter the balances in the same way): "
            + "; ".join("{" + ", ".join(t) + "}" for t in ident["tags"])
            + ". A gross error in one of them will be detected but cannot be located."
        )
    close = sets[sets["kind"] == "near"]
    if len(close):
        parts.append(
            "Sets the tests can tell apart only for very large gross errors: "
            + "; ".join(
                "{" + ", ".join(t) + f"}} (statistic above {z:.0f})"
                for t, z in zip(close["tags"], close["separating_z"], strict=True)
            )
            + "."
        )
    if parts:
        parts.append(
            "Add or move an instrument so that it enters another balance, or mark the "
            "instruments to trust (trusted = true in [tags.<ID>])."
        )
    return " ".join(parts)
