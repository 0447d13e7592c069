"""Results of several windows of one test with their joint covariance.

A test of several repeated runs, or of several load points, evaluates each window
on its own (average, reconcile, evaluate).  The windows share their instruments,
so the results of different windows are correlated through the instruments'
systematic uncertainties, while the random parts (the scatter of each window's
means) are independent.  This module holds the arithmetic:

* :func:`variance_split` splits each result of one window into a random and a
  systematic part, as a gradient over the averaged measurements (the *sources*);
* :func:`joint_covariance` builds the covariance of all results of all windows;
* :func:`combine` gives a weighted sum of the windows (the mean of repeated runs,
  or a weighted part-load figure) with its variance, GUM Eq. (13);
* :func:`repeatability` tests whether repeated runs agree within their random
  uncertainty.

References
----------
.. [1] JCGM 100:2008, *Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement* (GUM), clause 5.2 (correlated input quantities),
   Eq. (13); clause G.4 (Welch-Satterthwaite).
.. [2] J. R. Taylor, *An Introduction to Error Analysis*, 2nd ed., University
   Science Books, 1997, chapter 12 (the chi-squared test of agreement).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = [
    "VarianceSplit",
    "variance_split",
    "joint_covariance",
    "combine",
    "mean_variance",
    "repeatability",
    "HEADLINE_RESULTS",
]

#: Results whose repeatability is checked (with their ``corrected_`` forms), when the
#: plant kind has them.
HEADLINE_RESULTS = (
    "net_power",
    "heat_rate",
    "first_law_efficiency",
    "heat_export",
    "fuel_utilisation",
    "cooling_capacity",
    "heating_capacity",
    "cop",
    "boiler_efficiency",
)


@dataclass(frozen=True, eq=False)
class VarianceSplit:
    """The results of one window as linear functions of its sources.

    Attributes
    ----------
    sources : tuple of str
        The averaged tags (and groups) the reconciliation used, then the inputs
        stated outside the run (the fuel's heating value).
    gradient : pandas.DataFrame
        Index: result; columns: ``sources``.  Sensitivity of each result to each
        source's mean [result unit per source unit]; a row of NaN for a result
        that is not a propagated function of the sources (it then counts as fully
        systematic).
    cov_random : ndarray
        Random (scatter) covariance of the sources: ``u_random**2`` on the diagonal.
    cov_systematic : ndarray
        Systematic covariance of the sources: the averaged covariance less its
        random diagonal; the heating value's stated variance.
    u_random, u_systematic : pandas.Series
        Per result: standard uncertainty from the random and the systematic parts.
    """

    sources: tuple
    gradient: pd.DataFrame
    cov_random: np.ndarray
    cov_systematic: np.ndarray
    u_random: pd.Series
    u_systematic: pd.Series


def variance_split(performance, reconciliation) -> VarianceSplit:
    """Split each result's variance into a random and a systematic part.

    Parameters
    ----------
    performance : perftest.evaluation.results.Performance
        Its ``inputs`` and per-result ``budgets`` (sensitivities) are used.
    reconciliation : perftest.balance.plant.PlantReconciliation

    Returns
    -------
    VarianceSplit

    Notes
    -----
    The reconciled estimates are, at the solution, linear in the averaged
    measurements :math:`m` (covariance :math:`C`): :math:`\\hat z = L m`.  Weighted
    least squares leaves the adjustments uncorrelated with the estimates
    (:math:`\\mathrm{cov}(\\hat z, m - \\hat x) = 0`), so
    :math:`\\mathrm{cov}(\\hat z, \\hat x) = L C` and the gain is
    :math:`L = \\mathrm{cov}(\\hat z, \\hat x)\\,C^{-1}`, read from the
    reconciliation's joint covariance.  A result with sensitivities :math:`s` to
    the evaluation's inputs then has the gradient :math:`g = s^T L` over the
    measurements, and

    .. math:: u^2 = g^T C_r g + g^T C_s g

    with :math:`C_r = \\mathrm{diag}(u_{random}^2)` and :math:`C_s = C - C_r`
    (instrument uncertainty and shared calibration lots).  The two parts add up to
    the result's variance from the evaluation (checked by the tests).  Tags that
    stay outside the balances enter as they were averaged.
    """
    rec = reconciliation
    meas = rec.measurements
    solver = list(rec.solver_tags)
    carried = list(rec.carried)
    tags = solver + carried
    inputs = performance.inputs
    extra = [n for n in inputs.index if inputs.loc[n, "role"] == "heating_value"]
    rec_inputs = [n for n in inputs.index if n not in extra]
    S = np.asarray(rec.covariance(rec_inputs + tags), dtype=float)
    nq = len(rec_inputs)
    S_qm = np.nan_to_num(S[:nq, nq:])
    idx = np.array([meas.index(t) for t in tags], dtype=int)
    C = np.array(np.asarray(meas.cov, dtype=float)[np.ix_(idx, idx)])
    # The reconciliation treats the tags it carries apart from the balanced ones
    # (no covariance between the two sets); the gain must use the same C.
    ns = len(solver)
    C[:ns, ns:] = 0.0
    C[ns:, :ns] = 0.0
    L = np.linalg.solve(C, S_qm.T).T if tags else np.zeros((nq, 0))
    u_r = np.asarray(meas.u_random, dtype=float)[idx]
    C_r = np.diag(u_r**2)
    C_s = C - C_r
    n_t, n_e = len(tags), len(extra)
    cov_r = np.zeros((n_t + n_e, n_t + n_e))
    cov_s = np.zeros_like(cov_r)
    cov_r[:n_t, :n_t] = C_r
    cov_s[:n_t, :n_t] = C_s
    for k, name in enumerate(extra):
        cov_s[n_t + k, n_t + k] = float(inputs.loc[name, "u"]) ** 2
    sources = tuple(tags + extra)
    names = list(performance.results.index)
    G = np.full((len(names), n_t + n_e), np.nan)
    for r, name in enumerate(names):
        b = performance.budgets.get(name)
        if b is None or "sensitivity" not in b:
            continue
        s = b["sensitivity"].reindex(inputs.index).fillna(0.0)
        G[r, :n_t] = s[rec_inputs].to_numpy(float) @ L
        G[r, n_t:] = s[extra].to_numpy(float)
    gradient = pd.DataFrame(G, index=pd.Index(names, name="name"), columns=list(sources))
    Gz = np.nan_to_num(G)
    var_r = np.einsum("ij,jk,ik->i", Gz, cov_r, Gz)
    var_s = np.einsum("ij,jk,ik->i", Gz, cov_s, Gz)
    no_split = np.isnan(G).any(axis=1)
    u = performance.results["u"].to_numpy(float)
    var_r[no_split] = 0.0
    var_s[no_split] = u[no_split] ** 2
    return VarianceSplit(
        sources=sources,
        gradient=gradient,
        cov_random=cov_r,
        cov_systematic=cov_s,
        u_random=pd.Series(np.sqrt(np.maximum(var_r, 0.0)), index=names),
        u_systematic=pd.Series(np.sqrt(np.maximum(var_s, 0.0)), index=names),
    )


def _aligned(split: VarianceSplit, sources: list, names: list):
    """Gradient (results x all sources) and systematic covariance on all sources."""
    at = {s: i for i, s in enumerate(sources)}
    pos = [at[s] for s in split.sources]
    G = np.zeros((len(names), len(sources)))
    g = split.gradient.reindex(index=names).to_numpy(float)
    G[:, pos] = np.nan_to_num(g)
    Cs = np.zeros((len(sources), len(sources)))
    Cs[np.ix_(pos, pos)] = split.cov_systematic
    flags = np.isnan(g).any(axis=1)
    return G, Cs, flags


def joint_covariance(splits, covs, names) -> np.ndarray:
    """Covariance of the results of several windows of one test.

    Parameters
    ----------
    splits : sequence of VarianceSplit
        One per window.
    covs : sequence of pandas.DataFrame
        Each window's own covariance of its results (``Performance.cov``) [SI].
    names : sequence of str
        The results to combine (present in every window).

    Returns
    -------
    ndarray (W*R, W*R)
        Ordered window by window, result by result.

    Notes
    -----
    Within a window the block is the window's own covariance.  Between windows
    :math:`i \\ne j` only the systematic parts are shared: the same instrument
    carries the same systematic error into every window, so with
    :math:`D_i = \\mathrm{diag}(C_{s,i})^{1/2}` and the systematic correlation
    :math:`R` (mean of the two windows')

    .. math:: \\mathrm{cov}(r_i, r_j) = g_i^T D_i R D_j g_j,

    which is :math:`g_i^T C_s g_j` when both windows state the same systematic
    uncertainties; an uncertainty stated in percent of reading scales with each
    window's reading.  A result without a gradient (``NaN`` row) counts as fully
    correlated between windows: :math:`u_i u_j`.  The random parts are independent
    between windows.
    """
    names = list(names)
    sources = list(dict.fromkeys(s for sp in splits for s in sp.sources))
    W, R = len(splits), len(names)
    parts = [_aligned(sp, sources, names) for sp in splits]
    D = [np.sqrt(np.maximum(np.diag(Cs), 0.0)) for _, Cs, _ in parts]
    corr = []
    for (_, Cs, _), d in zip(parts, D, strict=True):
        with np.errstate(divide="ignore", invalid="ignore"):
            rho = Cs / np.outer(d, d)
        corr.append(np.where(np.outer(d, d) > 0, rho, 0.0))
    own = [c.loc[names, names].to_numpy(float) for c in covs]
    u = [np.sqrt(np.diag(c)) for c in own]
    out = np.zeros((W * R, W * R))
    for i in range(W):
        out[i * R : (i + 1) * R, i * R : (i + 1) * R] = own[i]
        for j in range(i + 1, W):
            Gi, _, fi = parts[i]
            Gj, _, fj = parts[j]
            Cij = D[i][:, None] * (0.5 * (corr[i] + corr[j])) * D[j][None, :]
            block = Gi @ Cij @ Gj.T
            # a result with no gradient: fully correlated with itself in the other window
            for r in np.flatnonzero(fi | fj):
                block[r, :] = 0.0
                block[:, r] = 0.0
                block[r, r] = u[i][r] * u[j][r]
            out[i * R : (i + 1) * R, j * R : (j + 1) * R] = block
            out[j * R : (j + 1) * R, i * R : (i + 1) * R] = block.T
    return out


def mean_variance(values, cov, weights=None) -> tuple[float, float]:
    """Weighted sum of correlated estimates and its variance.

    Parameters
    ----------
    values : array_like (N,)
    cov : array_like (N, N)
        Their covariance.
    weights : array_like (N,), optional
        Default ``1/N`` each (the mean).

    Returns
    -------
    (value, variance)

    Notes
    -----
    GUM Eq. (13) for :math:`y = \\sum_i w_i x_i` (sensitivities :math:`w_i`):
    :math:`u_c^2(y) = \\sum_i \\sum_j w_i w_j u(x_i, x_j)`.

    Examples
    --------
    >>> mean_variance([1.0, 3.0], [[1.0, 0.5], [0.5, 1.0]])
    (2.0, 0.75)
    """
    x = np.asarray(values, dtype=float)
    C = np.asarray(cov, dtype=float)
    w = np.full(x.size, 1.0 / x.size) if weights is None else np.asarray(weights, dtype=float)
    return float(w @ x), float(w @ C @ w)


def combine(values, joint, names, weights, dofs, level: float = 0.95) -> tuple:
    """A weighted sum of windows, per result, with its covariance.

    Parameters
    ----------
    values : ndarray (W, R)
        Each window's results [SI].
    joint : ndarray (W*R, W*R)
        :func:`joint_covariance`.
    names : sequence of str
        The R results.
    weights : array_like (W,)
        Weight of each window (``1/W`` each for the mean of repeated runs).
    dofs : ndarray (W, R)
        Each window's effective degrees of freedom of each result.
    level : float
        Coverage probability of ``U95``.

    Returns
    -------
    (DataFrame, ndarray)
        ``value, u, U95, k, dof`` per result, and the results' covariance (R, R).

    Notes
    -----
    The weighted sum has sensitivity :math:`w_i` to every window's result, so its
    covariance is :math:`(w \\otimes I)^T V (w \\otimes I)` (GUM Eq. 13).  Its
    effective degrees of freedom follow Welch-Satterthwaite (GUM Eq. G.2b) with the
    windows' finite-dof (random) parts: :math:`\\nu = u^4 / \\sum_i w_i^4 u_i^4/\\nu_i`,
    since the systematic parts count as exact (infinite dof).
    """
    from scipy import stats

    values = np.asarray(values, dtype=float)
    W, R = values.shape
    w = np.asarray(weights, dtype=float)
    M = np.kron(w[None, :], np.eye(R))  # (R, W*R)
    cov = M @ joint @ M.T
    value = w @ values
    u = np.sqrt(np.maximum(np.diag(cov), 0.0))
    u_win = np.sqrt(np.maximum(np.diag(joint), 0.0)).reshape(W, R)
    dofs = np.asarray(dofs, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        denom = np.nansum(np.where(np.isfinite(dofs), (w[:, None] * u_win) ** 4 / dofs, 0.0), 0)
        dof = np.where(denom > 0, u**4 / denom, math.inf)
    k = np.where(
        np.isfinite(dof), stats.t.ppf(0.5 + level / 2.0, np.maximum(dof, 1.0)), 0.0
    ) + np.where(np.isfinite(dof), 0.0, stats.norm.ppf(0.5 + level / 2.0))
    frame = pd.DataFrame(
        {"value": value, "u": u, "U95": k * u, "k": k, "dof": dof},
        index=pd.Index(list(names), name="name"),
    )
    return frame, cov


def repeatability(values, u_random, names, alpha: float = 0.05) -> pd.DataFrame:
    """Do repeated runs agree within their random uncertainty?

    Parameters
    ----------
    values : ndarray (N, R)
        Each run's results [SI].
    u_random : ndarray (N, R)
        Each run's random standard uncertainty of each result [SI].
    names : sequence of str
        The R results tested.
    alpha : float
        Significance level (0.05: agreement at 95 %).

    Returns
    -------
    pandas.DataFrame
        Per result: ``spread`` (largest minus smallest run) [SI], ``limit`` (for two
        runs, the largest difference their random parts allow at 1 - alpha) [SI],
        ``chi2``, ``dof`` (N - 1), ``p_value`` and ``passed``.

    Notes
    -----
    Systematic errors are common to the runs and cancel in their differences, so
    the runs are compared with their random parts only: the chi-squared test of
    the runs against their weighted mean [2]_,

    .. math:: \\chi^2 = \\sum_i (r_i - \\bar r_w)^2 / u_{r,i}^2,\\qquad
              \\bar r_w = \\sum_i r_i u_{r,i}^{-2} / \\sum_i u_{r,i}^{-2},

    with N - 1 degrees of freedom; the runs agree when its p-value is at least
    ``alpha``.  For two runs this is :math:`|r_1 - r_2| \\le z_{1-\\alpha/2}
    \\sqrt{u_{r,1}^2 + u_{r,2}^2}` (about :math:`2\\sqrt 2\\,u_r` for equal parts).
    A failed check says that the runs differ by more than their scatter explains
    (the plant moved between runs, or a run was not steady).
    """
    from scipy import stats

    x = np.asarray(values, dtype=float)
    u = np.asarray(u_random, dtype=float)
    N = x.shape[0]
    rows = []
    for r, name in enumerate(names):
        xr, ur = x[:, r], u[:, r]
        spread = float(np.max(xr) - np.min(xr))
        if N < 2 or not np.all(ur > 0):
            rows.append(dict(result=name, spread=spread, limit=math.nan, chi2=math.nan,
                             dof=N - 1, p_value=math.nan, passed=None))  # fmt: skip
            continue
        wts = 1.0 / ur**2
        mean_w = float(np.sum(wts * xr) / np.sum(wts))
        chi2 = float(np.sum((xr - mean_w) ** 2 * wts))
        p = float(stats.chi2.sf(chi2, N - 1))
        limit = (
            float(stats.norm.ppf(1 - alpha / 2) * math.sqrt(ur[0] ** 2 + ur[1] ** 2))
            if N == 2
            else math.nan
        )
        rows.append(dict(result=name, spread=spread, limit=limit, chi2=chi2, dof=N - 1,
                         p_value=p, passed=bool(p >= alpha)))  # fmt: skip
    return pd.DataFrame(
        rows, columns=["result", "spread", "limit", "chi2", "dof", "p_value", "passed"]
    ).set_index("result")
