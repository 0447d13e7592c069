"""Which measurements the gross-error tests cannot tell apart.

Serial elimination drops the measurement with the largest measurement-test
statistic.  Where another measurement's statistic is equal to it, or within the
sampling spread of the difference between the two, the choice between them is
arbitrary, and dropping the wrong one can move results by several uncertainties
while the global test passes.  This module finds those sets; the callers
(:mod:`perftest.balance.elimination`, :mod:`perftest.balance.plant`) take out every
member of a set together instead of picking one, and reconcile each single choice
as an alternative, to show how far the results depend on it.

Layer: above :mod:`perftest.balance.result` only (it reads result fields).

Notes
-----
With uncorrelated measurement errors, a gross error of size :math:`b` in measurement
:math:`i` gives the normalised adjustments the expected values
:math:`E[r_j] = \\rho_{ij} E[r_i]`, with :math:`\\rho_{ij} = V_{ij} / \\sqrt{V_{ii}
V_{jj}}` the correlation of the adjustments (:math:`V` their covariance), and the
statistics :math:`z = |r|` are unit normal about those values [1]_.  Two
measurements :math:`i` (the largest statistic) and :math:`j` are indistinguishable
when both hold:

1. the test cannot prefer :math:`i`: :math:`z_i - z_j \\le k \\sqrt{2 (1 - |\\rho_{ij}|)}`,
   the standard deviation of :math:`|r_i| - |r_j|` for two unit normals of
   correlation :math:`|\\rho|`, times :math:`k`;
2. one gross error in either explains both statistics, so the two are alternatives
   rather than two faults, or one fault and a bystander:
   :math:`|z_j - |\\rho_{ij}| z_i| \\le k \\sqrt{1 - \\rho_{ij}^2}` (an error in
   :math:`i` explains :math:`z_j`; the bound is the spread of :math:`r_j` given
   :math:`r_i`) and :math:`|z_i - |\\rho_{ij}| z_j| \\le k \\sqrt{1 - \\rho_{ij}^2}`
   (an error in :math:`j` explains :math:`z_i`).

3. the measurement test flags :math:`j` too (:math:`z_j` above its Sidak critical
   value at the level of the elimination): a measurement the test does not call
   suspect is no candidate for dropping, however weak the evidence against the
   others.  Exact ties are flagged together or not at all.

:math:`k = 1.96` (two-sided 95 %).  Exact ties (:math:`|\\rho| = 1`: instruments that
enter the same balances in the same way) meet both with zero spread; a relative
tolerance ``TIE_RTOL`` absorbs round-off.

References
----------
.. [1] S. Narasimhan, C. Jordache, "Data Reconciliation and Gross Error Detection",
   Gulf Publishing, 2000, Ch. 7 (distribution of the measurement test under a gross
   error; recalled from memory). DOI 10.1016/B978-088415255-2/50000-4
"""

from __future__ import annotations

import numpy as np

from perftest.balance._stats import sidak_critical_value
from perftest.balance.result import CHOICE_RTOL, as_dense

__all__ = ["TIE_RTOL", "SPREAD_K", "CHOICE_RTOL", "indistinguishable"]

#: Relative tolerance below which two measurement-test statistics count as equal
#: (round-off of the statistics is ~1e-12 relative; 1e-6 is far above it and far
#: below any difference a test could resolve).
TIE_RTOL = 1e-6

#: Coverage factor of the sampling spread (two-sided 95 % normal quantile).
SPREAD_K = 1.959963984540054


def _adjustment_row(result, i: int) -> np.ndarray:
    """Row ``i`` of the covariance of the adjustments, :math:`S - \\operatorname{cov}(\\hat x)`."""
    S = result.cov_measured
    s_row = S.getrow(i).toarray().ravel() if hasattr(S, "getrow") else np.asarray(S)[i]
    return np.asarray(s_row, dtype=float) - as_dense(result.x_cov)[i]


def indistinguishable(result, i: int, eligible: np.ndarray, alpha: float = 0.05) -> np.ndarray:
    """Measurements the tests cannot tell from measurement ``i``.

    Parameters
    ----------
    result : Reconciliation
        The reconciliation whose statistics are judged.
    i : int
        Index into ``result.x`` of the measurement with the largest statistic.
    eligible : ndarray of bool (n,)
        Measurements that may be dropped (not trusted, in the balance).
    alpha : float
        Family-wise level of the measurement test (condition 3).

    Returns
    -------
    ndarray of int
        Indices into ``result.x``, ``i`` first, then the others by decreasing
        statistic; just ``[i]`` when the choice is clear.

    Notes
    -----
    See the module notes for the two conditions.
    """
    z = np.asarray(result.z, dtype=float)
    sd = np.asarray(result.adjustment_u, dtype=float)
    n = z.size
    eligible = np.zeros(n, dtype=bool) | np.asarray(eligible, dtype=bool)
    eligible &= np.asarray(result.redundant, dtype=bool) & np.isfinite(z)
    eligible[i] = False
    if not eligible.any():
        return np.array([i])
    V_row = _adjustment_row(result, i)
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = np.abs(V_row) / (sd[i] * sd)
    rho = np.clip(np.nan_to_num(rho), 0.0, 1.0)
    zi = z[i]
    slack = TIE_RTOL * max(zi, 1.0)
    critical, _ = sidak_critical_value(alpha, int(np.count_nonzero(result.redundant)))
    flagged = (z > critical) | (z >= zi - slack)
    prefer = zi - z <= SPREAD_K * np.sqrt(2.0 * (1.0 - rho)) + slack
    cond = SPREAD_K * np.sqrt(1.0 - rho**2) + slack
    explained = (np.abs(z - rho * zi) <= cond) & (np.abs(zi - rho * z) <= cond)
    others = np.flatnonzero(eligible & flagged & prefer & explained)
    others = others[np.argsort(-z[others], kind="stable")]
    return np.concatenate([[i], others]).astype(int)
