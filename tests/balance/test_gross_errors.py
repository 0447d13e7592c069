"""Gross-error tests: statistics written out independently, chi-square and normal
quantiles from scipy.stats, detection of injected errors, false-alarm rates by
seeded Monte Carlo."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.stats
from flow_networks import random_flow_network

import perftest
from perftest.balance import (
    global_test,
    measurement_test,
    nodal_test,
    reconcile_linear,
    reconcile_linear_batch,
    reconcile_nonlinear,
    serial_elimination,
    serial_elimination_nonlinear,
    vdi2048_criterion,
)
from perftest.errors import InputError, ReconciliationWarning

# Six-stream network of a splitter, exchanger, valve and mixer (see
# tests/test_balance_linear.py), with a recycle-free chain of two more nodes.
A_NET = np.array(
    [
        [1, -1, -1, 0, 0, 0, 0, 0],
        [0, 1, 0, -1, 0, 0, 0, 0],
        [0, 0, 1, 0, -1, 0, 0, 0],
        [0, 0, 0, 1, 1, -1, 0, 0],
        [0, 0, 0, 0, 0, 1, -1, 0],
        [0, 0, 0, 0, 0, 0, 1, -1],
    ],
    dtype=float,
)
TRUTH = np.array([100.0, 64.0, 36.0, 64.0, 36.0, 100.0, 100.0, 100.0])
U_NET = np.array([1.0, 0.8, 0.6, 0.8, 0.6, 1.0, 1.2, 1.0])


def test_global_test_against_chi2_quantile():
    rng = np.random.default_rng(0)
    x = TRUTH + rng.normal(size=8) * U_NET
    r = reconcile_linear(x, np.diag(U_NET**2), A_NET)
    g = global_test(r, alpha=0.1)
    assert g.critical == pytest.approx(scipy.stats.chi2.ppf(0.9, 6), rel=1e-12)
    assert g.passed == (r.chi2 <= g.critical)
    assert g.p_value == pytest.approx(scipy.stats.chi2.sf(r.chi2, 6), rel=1e-12)


def test_sidak_measurement_test_critical_value():
    r = reconcile_linear(TRUTH, np.diag(U_NET**2), A_NET)
    t = measurement_test(r, alpha=0.05)
    n_r = 8
    alpha_per = 1 - (1 - 0.05) ** (1 / n_r)
    assert t.alpha_per == pytest.approx(alpha_per, rel=1e-12)
    assert t.critical == pytest.approx(scipy.stats.norm.ppf(1 - alpha_per / 2), rel=1e-12)
    assert t.n_tested == n_r and not t.flagged.any()


def test_nodal_test_statistic_written_out():
    rng = np.random.default_rng(1)
    x = TRUTH + rng.normal(size=8) * U_NET
    x[2] += 5.0
    S = np.diag(U_NET**2)
    r = reconcile_linear(x, S, A_NET)
    t = nodal_test(r)
    stat = np.abs(A_NET @ x) / np.sqrt(np.diag(A_NET @ S @ A_NET.T))
    np.testing.assert_allclose(t.statistic, stat, rtol=1e-12)
    # A +5 bias on stream 2 (u 0.6) shows at the splitter and the valve, the two
    # nodes the stream touches.
    assert t.flagged[0] and t.flagged[2]


def _split(unmeasured):
    measured = [j for j in range(8) if j not in unmeasured]
    return A_NET[:, measured], A_NET[:, unmeasured], measured


def test_nodal_rows_do_not_follow_rounding():
    """With unmeasured variables the pivoted QR that finds the left null space of B
    turns its basis with rounding wherever columns of B tie in norm (here every
    coefficient is one and every weight equal: 4 of 20 perturbations of B by one unit
    in the last place changed that basis's row statistics by O(1)).  The nodal test
    reads the canonical basis, which depends on the space alone: its rows, and the
    reconciled values, chi2 and the measurement test (which depend on the space only,
    Crowe, Garcia Campos and Hrymak, AIChE J. 29(6), 1983), move by rounding."""
    rng = np.random.default_rng(4)
    A, B, measured = _split([3, 6])
    u = np.ones(len(measured))
    x = TRUTH[measured] + rng.normal(size=len(measured)) * u
    ref = reconcile_linear(x, np.diag(u**2), A, B=B)
    ref_t = nodal_test(ref)
    for _ in range(20):
        Bp = B * (1.0 + rng.choice([-1.0, 0.0, 1.0], size=B.shape) * 2.0**-52)
        r = reconcile_linear(x, np.diag(u**2), A, B=Bp)
        t = nodal_test(r)
        # rounding of a six-row system: 1e-10 leaves several orders of margin
        np.testing.assert_allclose(t.statistic, ref_t.statistic, rtol=1e-10)
        np.testing.assert_array_equal(t.constraint, ref_t.constraint)
        assert r.chi2 == pytest.approx(ref.chi2, rel=1e-12)
        np.testing.assert_allclose(r.x, ref.x, rtol=1e-12)
        np.testing.assert_allclose(r.z, ref.z, rtol=1e-10, atol=1e-12)


def test_nodal_rows_written_out_with_unmeasured_streams():
    """Stream 3 (node 1 -> node 3) and stream 6 (node 4 -> node 5) unmeasured.  Each
    joins two balances, which the canonical basis gives as one row anchored to the
    first of them: node 1 + node 3 and node 4 + node 5 (the stream leaves one and
    enters the other).  Nodes 0 and 2 hold no unmeasured stream and are rows of
    their own.  Statistics written out from the definition of the nodal test (the
    residual of a combined balance over its standard deviation; Narasimhan and
    Jordache, Data Reconciliation and Gross Error Detection, 2000, Ch. 7)."""
    rng = np.random.default_rng(8)
    A, B, measured = _split([3, 6])
    u = U_NET[measured]
    S = np.diag(u**2)
    x = TRUTH[measured] + rng.normal(size=len(measured)) * u
    x[0] += 6.0  # a bias on the feed
    t = nodal_test(reconcile_linear(x, S, A, B=B))
    np.testing.assert_array_equal(t.constraint, [0, 1, 2, 4])
    combine = np.zeros((4, 6))  # balances 0, 1 + 3, 2, 4 + 5
    combine[[0, 1, 1, 2, 3, 3], [0, 1, 3, 2, 4, 5]] = 1.0
    np.testing.assert_array_equal(combine @ B, 0.0)  # the unmeasured streams cancel
    rows = combine @ A
    stat = np.abs(rows @ x) / np.sqrt(np.einsum("ij,jk,ik->i", rows, S, rows))
    np.testing.assert_allclose(t.statistic, stat, rtol=1e-12)
    assert t.flagged[0]  # the feed's own balance


def test_nodal_rows_the_same_on_the_dense_and_the_sparse_path():
    """The sparse path eliminates the unmeasured variables block by block, the dense
    one in one QR: both give the canonical rows, in the same order and units."""
    import scipy.sparse as sp

    rng = np.random.default_rng(12)
    A, B, measured = _split([2, 3, 6])
    u = U_NET[measured]
    x = TRUTH[measured] + rng.normal(size=len(measured)) * u
    dense = reconcile_linear(x, np.diag(u**2), A, B=B * 2.5)
    sparse = reconcile_linear(x, sp.diags(u**2), sp.csr_matrix(A), B=sp.csr_matrix(B * 2.5))
    assert dense.method == "linear-dense" and sparse.method == "linear-sparse"
    np.testing.assert_array_equal(dense.constraint_rows, sparse.constraint_rows)
    # two factorisations of a small system: equal to rounding
    np.testing.assert_allclose(dense.constraint_residual, sparse.constraint_residual, atol=1e-12)
    np.testing.assert_allclose(dense.constraint_u, sparse.constraint_u, rtol=1e-12)


def test_nodal_rows_of_random_networks_dense_sparse_and_rounding():
    """Random flow networks (2-14 nodes, some coefficients of one, some not; random
    unmeasured streams, observable or not; equal or unequal weights): the dense and
    the sparse path give the same rows, and a change of B in the last place changes
    none of them."""
    import scipy.sparse as sp

    rng = np.random.default_rng(7)
    cases = 0
    for _ in range(60):
        A, un, me, u, x = random_flow_network(rng, 15, 2)
        B = A[:, un]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            d = reconcile_linear(x, np.diag(u**2), A[:, me], B=B)
            s = reconcile_linear(x, sp.diags(u**2), sp.csr_matrix(A[:, me]), B=sp.csr_matrix(B))
            Bp = B * (1.0 + rng.choice([-1.0, 0.0, 1.0], size=B.shape) * 2.0**-52)
            t = reconcile_linear(x, np.diag(u**2), A[:, me], B=Bp)
        size = max(1.0, float(np.abs(d.constraint_residual).max(initial=0.0)))
        for other in (s, t):
            np.testing.assert_array_equal(other.constraint_rows, d.constraint_rows)
            # two factorisations of systems of at most 14 rows: equal to 1e-9
            np.testing.assert_allclose(
                other.constraint_residual, d.constraint_residual, rtol=1e-9, atol=1e-9 * size
            )
            np.testing.assert_allclose(other.constraint_u, d.constraint_u, rtol=1e-9, atol=1e-12)
        cases += 1
    assert cases == 60


def test_nodal_rows_are_the_merged_nodes_of_a_flow_network():
    """For a flow network the canonical rows are the classic projection by node
    merging: the nodes joined by unmeasured streams are merged into one (its balance
    the sum of theirs, in which those streams cancel), each merged node anchored to
    one of its nodes, and every other node is a row of its own (Mah, Stanley and
    Downing, Ind. Eng. Chem. Process Des. Dev. 15(1), 1976; from memory).  Checked
    on random networks against the connected components of the unmeasured streams
    (scipy.sparse.csgraph)."""
    import scipy.sparse as sp
    from scipy.sparse.csgraph import connected_components

    rng = np.random.default_rng(31)
    for _ in range(30):
        m = int(rng.integers(3, 14))
        ns = int(rng.integers(m + 2, 3 * m + 3))
        ends = np.array([rng.choice(m, 2, replace=False) for _ in range(ns)])
        A = np.zeros((m, ns))
        A[ends[:, 0], np.arange(ns)] = 1.0
        A[ends[:, 1], np.arange(ns)] = -1.0
        un = rng.choice(ns, int(rng.integers(1, m)), replace=False)
        me = np.setdiff1d(np.arange(ns), un)
        u = rng.uniform(0.5, 2.0, me.size)
        x = rng.uniform(10.0, 100.0, me.size)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            r = reconcile_linear(x, np.diag(u**2), A[:, me], B=A[:, un])
        graph = sp.coo_matrix((np.ones(un.size), (ends[un, 0], ends[un, 1])), shape=(m, m))
        _, group = connected_components(graph, directed=False)
        # one row per merged node, anchored to one of its nodes
        np.testing.assert_array_equal(np.sort(group[r.constraint_rows]), np.unique(group))
        merged = np.array([(A[group == group[i]][:, me] @ x).sum() for i in r.constraint_rows])
        # rounding of sums of at most ~40 terms of size 100: 1e-9 absolute is ample
        np.testing.assert_allclose(r.constraint_residual, merged, rtol=1e-10, atol=1e-9)


def test_canonical_rows_depend_on_the_space_alone():
    """Any orthonormal basis of the same space (here turned by random orthogonal
    matrices) gives the same canonical rows; they are the identity on their anchors
    and annul B (whose left null space scipy.linalg.null_space, an SVD, gives)."""
    import scipy.linalg
    import scipy.stats

    from perftest.balance import _dense

    rng = np.random.default_rng(21)
    m, k = 14, 6
    B = np.zeros((m, k))
    for j in range(k):
        a, b = rng.choice(m, 2, replace=False)
        B[a, j], B[b, j] = 1.0, -1.0
    N = scipy.linalg.null_space(B.T)  # orthonormal basis of the left null space
    p = N.shape[1]
    ref = None
    for seed in range(6):
        P = (N @ scipy.stats.ortho_group.rvs(p, random_state=seed)).T
        canon = _dense.CanonicalRows(P)
        C = canon(P)  # the canonical rows themselves
        if ref is None:
            ref = canon.rows, C
            np.testing.assert_array_equal(np.diff(canon.rows) > 0, True)
            # rounding of a 14-row problem: 1e-12
            np.testing.assert_allclose(C[:, canon.rows], np.eye(p), atol=1e-12)
            np.testing.assert_allclose(C @ B, 0.0, atol=1e-12)
            continue
        np.testing.assert_array_equal(canon.rows, ref[0])
        np.testing.assert_allclose(C, ref[1], atol=1e-12)
    # the same rows from a sparse array in the old basis
    import scipy.sparse as sp

    np.testing.assert_allclose(canon(sp.csr_matrix(P)).toarray(), ref[1], atol=1e-12)


def test_vdi2048_matches_definition():
    rng = np.random.default_rng(2)
    x = TRUTH + rng.normal(size=8) * U_NET
    x[6] += 4.0
    S = np.diag(U_NET**2)
    r = reconcile_linear(x, S, A_NET)
    v = r.x - x
    var_v = np.diag(S) - np.diag(r.x_cov)
    np.testing.assert_array_equal(vdi2048_criterion(r), np.abs(v) / np.sqrt(var_v) <= 1.96)
    assert not vdi2048_criterion(r).all()


def test_measurement_test_family_wise_false_alarm_rate():
    # Without gross errors the Sidak-corrected test flags at least one measurement in
    # at most ~alpha of the snapshots (Sidak is exact for independent statistics and
    # conservative for correlated ones).
    rng = np.random.default_rng(3)
    N = 20000
    X = TRUTH + rng.normal(size=(N, 8)) * U_NET
    batch = reconcile_linear_batch(X, np.diag(U_NET**2), A_NET)
    r = reconcile_linear(X[0], np.diag(U_NET**2), A_NET)
    crit = measurement_test(r, 0.05).critical
    rate = np.mean((batch.z > crit).any(axis=1))
    # Binomial standard error at 5 %: sqrt(0.05 * 0.95 / N) ~ 0.0015; allow 4 of them
    # above alpha, and require the rate not to collapse to nothing (> 1 %).
    assert 0.01 < rate < 0.05 + 4 * 0.0015
    # The per-measurement statistic is |N(0, 1)|: its mean is sqrt(2/pi).
    assert batch.z.mean(axis=0) == pytest.approx(np.full(8, np.sqrt(2 / np.pi)), abs=0.03)


def test_serial_elimination_finds_injected_error():
    rng = np.random.default_rng(4)
    x = TRUTH + rng.normal(size=8) * U_NET * 0.5
    x[6] += 8.0  # stream 6 reads 8 high (about 7 standard uncertainties)
    S = np.diag(U_NET**2)
    names = [f"F{i}" for i in range(8)]
    out = serial_elimination(x, S, A_NET, alpha=0.05, names=names)
    assert out.dropped == (6,)
    assert out.steps[0].dropped is None and not out.steps[0].passed
    assert out.steps[1].name == "F6" and out.steps[1].passed and out.passed
    assert out.steps[1].dof == out.steps[0].dof - 1
    # Dropping measurement i with diagonal S lowers chi2 by exactly z_i^2
    # (the measurement test is then the maximum-power test).
    r0 = reconcile_linear(x, S, A_NET)
    assert out.steps[0].chi2 - out.steps[1].chi2 == pytest.approx(r0.z[6] ** 2, rel=1e-9)
    # The dropped flow is estimated from the balances, close to the truth.
    assert abs(out.x[6] - TRUTH[6]) < 3 * U_NET[6]
    assert r0.suspects().tolist() == [6]
    assert perftest.serial_elimination is serial_elimination


def test_serial_elimination_nonlinear_finds_injected_error():
    # Mixer mass and energy balances (x = m0, m1, m2, h0, h1, h2) plus a second
    # flow meter on stream 2 (x6).
    def res(x, y):
        m0, m1, m2, h0, h1, h2, m2b = x
        return np.array([m0 + m1 - m2, m0 * h0 + m1 * h1 - m2 * h2, m2 - m2b])

    truth = np.array([10.0, 5.0, 15.0, 100.0, 300.0, 500.0 / 3.0, 15.0])
    u = np.array([0.1, 0.05, 0.15, 1.0, 1.5, 1.2, 0.15])
    rng = np.random.default_rng(5)
    x = truth + rng.normal(size=7) * u * 0.3
    x[2] += 1.5  # ten standard uncertainties on the first meter of stream 2
    out = serial_elimination_nonlinear(res, x, np.diag(u**2), alpha=0.05)
    assert out.dropped[0] == 2 and out.passed
    assert abs(out.x[2] - truth[2]) < 3 * u[2]
    lin = reconcile_nonlinear(res, x, np.diag(u**2))
    assert 2 in lin.suspects().tolist()


def test_elimination_stops_without_redundancy():
    # Two meters on one pipe disagreeing grossly, with unequal uncertainties: the
    # one statistic they share (|r| / sqrt(u1^2 + u2^2) for one balance) cannot say
    # which is wrong.  Neither is dropped: the one redundancy they share is taken
    # out, which leaves no degree of freedom and both readings as they are.  Each
    # single choice is on record: dropping either gives the other's reading to both.
    with pytest.warns(ReconciliationWarning, match="cannot tell apart"):
        out = serial_elimination([10.0, 20.0], np.diag([1.0, 4.0]), [[1.0, -1.0]])
    assert len(out.steps) == 2 and out.steps[-1].dof == 0 and out.dropped == ()
    assert out.steps[-1].passed  # p_value 1 with no degrees of freedom
    np.testing.assert_allclose(out.x, [10.0, 20.0], rtol=1e-12)  # rounding only
    assert sorted(a.dropped for a in out.alternatives) == [0, 1]
    for a in out.alternatives:
        assert a.result.dof == 0 and a.result.p_value == 1.0
        kept = 1 - a.dropped
        np.testing.assert_allclose(a.x, [[10.0, 20.0][kept]] * 2, rtol=1e-12)
    # both estimates move by the full disagreement, 10, over the two choices
    np.testing.assert_allclose(out.choice_spread, [10.0, 10.0], rtol=1e-12)
    assert out.depends_on_choice.all()


@pytest.mark.parametrize("alpha", [0.0, 1.0, -0.1, "0.05"])
def test_bad_alpha(alpha):
    r = reconcile_linear(TRUTH, np.diag(U_NET**2), A_NET)
    with pytest.raises(InputError, match="'alpha' parameter of global_test"):
        global_test(r, alpha)
