"""Linear reconciliation checked against independent formulations.

Outside references used here:
- the Lagrange-multiplier closed form written out in each test;
- the full KKT system of the constrained least-squares problem, solved directly;
- scipy.optimize.minimize (SLSQP) on the same weighted objective;
- scipy.stats.chi2 (distribution of the global statistic) and Monte Carlo with numpy.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import scipy.optimize
import scipy.sparse as sp
import scipy.stats
from flow_networks import random_flow_network

import perftest
from perftest.balance import reconcile_linear, reconcile_linear_batch
from perftest.errors import InputError, ReconciliationWarning

# Agreement between two exact algorithms in double precision on well-conditioned
# problems of size <= 30: rounding differences of order 1e-13 relative; 1e-9 leaves
# room for the condition number (< 1e3 here) without hiding a wrong formula.
EXACT = 1e-9


def network(m, n, rng):
    """Incidence matrix of n streams among m nodes plus the environment (node m)."""
    A = np.zeros((m, n))
    for j in range(n):
        a, b = rng.choice(m + 1, 2, replace=False)
        if a < m:
            A[a, j] = 1.0
        if b < m:
            A[b, j] = -1.0
    return A


def closed_form(x, S, A, b):
    """x_hat = x - S A^T (A S A^T)^-1 (A x - b), written out independently."""
    M = A @ S @ A.T
    r = A @ x - b
    lam = np.linalg.solve(M, r)
    xhat = x - S @ A.T @ lam
    cov = S - S @ A.T @ np.linalg.solve(M, A @ S)
    chi2 = r @ lam
    return xhat, cov, chi2


def kkt(x, S, A, b, B):
    """Solve [[S^-1, 0, A^T], [0, 0, B^T], [A, B, 0]] [x; y; lam] = [S^-1 x; 0; b]."""
    n, k, m = x.size, B.shape[1], A.shape[0]
    Si = np.linalg.inv(S)
    K = np.zeros((n + k + m, n + k + m))
    K[:n, :n] = Si
    K[:n, n + k :] = A.T
    K[n : n + k, n + k :] = B.T
    K[n + k :, :n] = A
    K[n + k :, n : n + k] = B
    rhs = np.concatenate([Si @ x, np.zeros(k), b])
    sol = np.linalg.solve(K, rhs)
    # The solution is linear in x: d sol / d x = Kinv[:, :n] Si, giving the covariance.
    Kinv = np.linalg.inv(K)
    J = Kinv[:, :n] @ Si
    cov = J @ S @ J.T
    return sol[:n], sol[n : n + k], cov[:n, :n], cov[n : n + k, n : n + k]


def random_spd(n, rng):
    L = rng.normal(size=(n, n)) * 0.3 + np.eye(n)
    return L @ L.T


def test_single_node_by_hand():
    # 10 = 4 + 5 with unit variances: each adjusted by 1/3 of the imbalance 1.
    r = reconcile_linear([10.0, 4.0, 5.0], np.eye(3), [[1.0, -1.0, -1.0]])
    np.testing.assert_allclose(r.x, [10 - 1 / 3, 4 + 1 / 3, 5 + 1 / 3], rtol=0, atol=1e-12)
    assert r.dof == 1
    assert r.chi2 == pytest.approx(1 / 3, abs=1e-12)
    # V = S A^T (A S A^T)^-1 A S = 1/3 ones: z = (1/3) / sqrt(1/3)
    np.testing.assert_allclose(r.z, np.full(3, np.sqrt(1 / 3)), atol=1e-12)
    assert r.converged and r.iterations == 1


@pytest.mark.parametrize("correlated", [False, True])
def test_closed_form_without_unmeasured(correlated):
    rng = np.random.default_rng(3)
    A = network(5, 12, rng)
    x = rng.normal(50, 5, 12)
    b = rng.normal(0, 1, 5)
    S = random_spd(12, rng) if correlated else np.diag(rng.uniform(0.2, 3, 12))
    r = reconcile_linear(x, S, A, b)
    xhat, cov, chi2 = closed_form(x, S, A, b)
    np.testing.assert_allclose(r.x, xhat, rtol=EXACT, atol=EXACT)
    np.testing.assert_allclose(r.x_cov, cov, rtol=EXACT, atol=EXACT * np.abs(S).max())
    assert r.chi2 == pytest.approx(chi2, rel=EXACT)
    assert r.dof == np.linalg.matrix_rank(A)
    assert r.p_value == pytest.approx(scipy.stats.chi2.sf(chi2, r.dof), rel=EXACT)
    V = S - cov
    z = np.abs(xhat - x) / np.sqrt(np.diag(V))
    np.testing.assert_allclose(r.z, z, rtol=1e-7)  # z divides by sqrt(V_ii): looser
    np.testing.assert_allclose(np.abs(A @ r.x - b), 0, atol=1e-9 * np.abs(x).max())


def test_unmeasured_against_kkt():
    rng = np.random.default_rng(5)
    A_full = network(6, 14, rng)
    unmeasured = [2, 7, 11]
    measured = [j for j in range(14) if j not in unmeasured]
    A, B = A_full[:, measured], A_full[:, unmeasured]
    # Pick a case where every unmeasured stream is observable (B full column rank).
    assert np.linalg.matrix_rank(B) == 3
    x = rng.normal(20, 3, 11)
    S = np.diag(rng.uniform(0.5, 2, 11))
    b = np.zeros(6)
    r = reconcile_linear(x, S, A, b, B)
    xk, yk, cxk, cyk = kkt(x, S, A, b, B)
    np.testing.assert_allclose(r.x, xk, rtol=EXACT, atol=EXACT)
    np.testing.assert_allclose(r.y, yk, rtol=EXACT, atol=EXACT)
    np.testing.assert_allclose(r.x_cov, cxk, atol=EXACT)
    np.testing.assert_allclose(r.y_cov, cyk, atol=EXACT)
    assert r.observable.all()
    assert r.dof == np.linalg.matrix_rank(A_full) - 3


def test_against_slsqp_with_unmeasured():
    rng = np.random.default_rng(11)
    A_full = network(4, 9, rng)
    A, B = A_full[:, :7], A_full[:, 7:]
    x = rng.normal(30, 4, 7)
    u = rng.uniform(0.5, 1.5, 7)
    r = reconcile_linear(x, np.diag(u**2), A, None, B)

    def obj(v):
        return np.sum(((v[:7] - x) / u) ** 2)

    cons = {"type": "eq", "fun": lambda v: A @ v[:7] + B @ v[7:]}
    start = np.concatenate([x, np.zeros(2)])
    opt = scipy.optimize.minimize(
        obj, start, constraints=[cons], method="SLSQP", options={"ftol": 1e-14, "maxiter": 500}
    )
    assert opt.success
    # SLSQP stops on ftol of the objective (~1e-14 relative): the variables are
    # then good to about sqrt(ftol) * scale ~ 1e-6 of values near 30 (u ~ 1).
    np.testing.assert_allclose(r.x, opt.x[:7], atol=1e-5)
    obs = r.observable
    np.testing.assert_allclose(r.y[obs], opt.x[7:][obs], atol=1e-5)
    assert r.chi2 == pytest.approx(opt.fun, rel=1e-6)


def test_textbook_flow_network_structure():
    """Flow network with a heat exchanger bypass.

    Structure after the heat-exchanger-with-bypass flow example in Narasimhan &
    Jordache (2000), "Data Reconciliation and Gross Error Detection", Ch. 3 (layout
    and numbers from memory, not read from the book): splitter, exchanger, valve,
    mixer; six streams, four nodes.  Checked against the closed form and the KKT
    system, not against the book's printed results.
    """
    # Streams: 1 feed -> splitter -> 2 (to exchanger), 3 (bypass); 2 -> exchanger -> 4;
    # 3 -> valve -> 5; mixer: 4 + 5 -> 6.
    A = np.array(
        [
            [1, -1, -1, 0, 0, 0],  # splitter
            [0, 1, 0, -1, 0, 0],  # exchanger
            [0, 0, 1, 0, -1, 0],  # valve
            [0, 0, 0, 1, 1, -1],  # mixer
        ],
        dtype=float,
    )
    x = np.array([101.91, 64.45, 34.65, 64.20, 36.44, 98.88])  # from memory
    S = np.diag(np.array([1.0, 0.64, 0.36, 0.64, 0.36, 1.0]))  # from memory
    r = reconcile_linear(x, S, A)
    xhat, cov, chi2 = closed_form(x, S, A, np.zeros(4))
    np.testing.assert_allclose(r.x, xhat, rtol=EXACT)
    assert r.chi2 == pytest.approx(chi2, rel=EXACT)
    assert r.dof == 4
    # Flows 2 and 4 unmeasured: the exchanger balance fixes neither alone, but the
    # splitter and mixer do; KKT gives the same answer.
    meas = [0, 2, 4, 5]
    r2 = reconcile_linear(x[meas], S[np.ix_(meas, meas)], A[:, meas], None, A[:, [1, 3]])
    xk, yk, *_ = kkt(x[meas], S[np.ix_(meas, meas)], A[:, meas], np.zeros(4), A[:, [1, 3]])
    np.testing.assert_allclose(r2.x, xk, rtol=EXACT)
    np.testing.assert_allclose(r2.y, yk, rtol=EXACT)
    assert r2.dof == 2


@pytest.mark.parametrize("form", [np.asarray, sp.csr_matrix])
def test_unobservable_and_nonredundant(form):
    # Node 1: x0 = y0 + y1 (y0, y1 cannot be separated); node 2: x0 = x1 (redundant).
    # Row 3: y2 = x2, so x2 is not redundant and y2 is observable.
    A = np.array([[1.0, 0, 0], [1.0, -1, 0], [0, 0, 1.0]])
    B = np.array([[-1.0, -1.0, 0], [0, 0, 0], [0, 0, -1.0]])
    x = np.array([10.0, 11.0, 3.0])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = reconcile_linear(x, form(np.diag([1.0, 1.0, 0.25])), form(A), None, form(B))
    np.testing.assert_array_equal(r.observable, [False, False, True])
    assert np.isnan(r.y[:2]).all() and np.isnan(r.y_u[:2]).all()
    assert r.y[2] == pytest.approx(3.0, abs=1e-12)
    assert r.y_u[2] == pytest.approx(0.5, abs=1e-12)
    np.testing.assert_array_equal(r.redundant, [True, True, False])
    assert np.isnan(r.z[2])
    np.testing.assert_allclose(r.x[:2], [10.5, 10.5], atol=1e-12)
    assert r.dof == 1
    assert np.isnan(r.y_cov[0]).all() and r.y_cov[2, 2] == pytest.approx(0.25)


def test_dependent_rows_are_dropped():
    rng = np.random.default_rng(8)
    A = network(6, 15, rng)
    x = rng.normal(10, 2, 15)
    S = np.diag(rng.uniform(0.5, 2, 15))
    ref = reconcile_linear(x, S, A)
    # Add the sum of all rows and a duplicated row: same constraint set.
    A2 = np.vstack([A, A.sum(axis=0), 2.0 * A[1]])
    r = reconcile_linear(x, S, A2)
    assert r.dof == ref.dof
    np.testing.assert_allclose(r.x, ref.x, atol=EXACT)
    np.testing.assert_allclose(r.x_cov, ref.x_cov, atol=EXACT)


def test_contradicting_constraints_raise():
    A = np.array([[1.0, -1.0], [1.0, -1.0]])
    with pytest.raises(InputError, match="consistent"):
        reconcile_linear([1.0, 2.0], np.eye(2), A, [0.0, 1.0])
    # Unmeasured y fixed to two values.
    with pytest.raises(InputError, match="consistent"):
        reconcile_linear([1.0], np.eye(1), [[0.0], [0.0]], [3.0, 4.0], [[1.0], [1.0]])


def test_zero_redundancy_warns_and_returns():
    # y = x0 + x1: all measurements only determine y.
    with pytest.warns(ReconciliationWarning, match="no redundancy"):
        r = reconcile_linear([1.0, 2.0], np.eye(2), [[1.0, 1.0]], None, [[-1.0]])
    assert r.dof == 0 and r.chi2 == 0 and r.p_value == 1.0
    np.testing.assert_array_equal(r.x, [1.0, 2.0])
    assert r.y[0] == pytest.approx(3.0)
    assert r.y_u[0] == pytest.approx(np.sqrt(2.0))
    assert not r.redundant.any() and np.isnan(r.z).all()


def test_scaling_invariance():
    rng = np.random.default_rng(21)
    A = network(5, 11, rng)
    A, B = A[:, :9], A[:, 9:]
    x = rng.normal(100, 10, 9)
    S = random_spd(9, rng)
    r = reconcile_linear(x, S, A, None, B)
    # Change units of every measured variable: x' = D x, S' = D S D, A' = A D^-1,
    # and of the unmeasured ones: y' = E y, B' = B E^-1.
    D = 10.0 ** rng.uniform(-4, 4, 9)
    E = 10.0 ** rng.uniform(-4, 4, 2)
    r2 = reconcile_linear(D * x, D[:, None] * S * D[None, :], A / D, None, B / E)
    # Scales span 8 decades; the solution is computed in equilibrated units, so it
    # should agree to ~1e-12 relative; 1e-8 allows for cond ~ 1e3 of the problem.
    np.testing.assert_allclose(r2.x / D, r.x, rtol=1e-8)
    np.testing.assert_allclose(r2.y / E, r.y, rtol=1e-8)
    np.testing.assert_allclose(r2.z, r.z, rtol=1e-8)
    assert r2.chi2 == pytest.approx(r.chi2, rel=1e-8)
    assert r2.dof == r.dof
    np.testing.assert_array_equal(r2.observable, r.observable)


def test_chi2_distribution_and_covariance_by_monte_carlo():
    rng = np.random.default_rng(2024)
    A = network(6, 14, rng)
    A, B = A[:, :12], A[:, 12:]
    u = rng.uniform(0.5, 2.0, 12)
    S = np.diag(u**2)
    # True values consistent with the balances: reconcile anything, keep the result.
    truth = reconcile_linear(rng.normal(50, 5, 12), S, A, None, B).x
    N = 20000
    X = truth + rng.normal(size=(N, 12)) * u
    batch = reconcile_linear_batch(X, S, A, None, B)
    dof = batch.dof
    # Mean of chi2_dof is dof with standard deviation sqrt(2 dof / N) ~ 0.03 here:
    # five standard errors.
    assert abs(batch.chi2.mean() - dof) < 5 * np.sqrt(2 * dof / N)
    # KS against the chi-square law: a correct statistic gives p uniform; 1e-3 keeps
    # false alarms rare while a wrong dof (+-1) gives p ~ 1e-100 at this N.
    ks = scipy.stats.kstest(batch.chi2, scipy.stats.chi2(dof).cdf)
    assert ks.pvalue > 1e-3
    # Sample covariance of the reconciled values vs the propagated one: each entry's
    # standard error is about sqrt(2/N) * var ~ 1e-2 * var; allow 6 standard errors.
    # Streams that the balances fix completely have zero variance; compare the rest.
    emp = np.cov(batch.x, rowvar=False)
    var = np.diag(batch.x_cov)
    ok = var > 1e-9 * var.max()
    scale = np.sqrt(np.outer(var[ok], var[ok]))
    err = np.abs(emp - batch.x_cov)[np.ix_(ok, ok)] / scale
    assert err.max() < 6 * np.sqrt(2 / N)
    # Unbiased: mean reconciled value equals the truth within 5 standard errors.
    # (A fully determined stream has a variance of zero up to round-off, which may be
    # a tiny negative number: clip it before the square root.)
    se = np.sqrt(np.maximum(np.diag(batch.x_cov), 0.0) / N)
    assert np.all(np.abs(batch.x.mean(axis=0) - truth) < 5 * se + 1e-12)


def test_batch_matches_single():
    rng = np.random.default_rng(4)
    A = network(5, 12, rng)
    A, B = A[:, :10], A[:, 10:]
    S = random_spd(10, rng)
    X = rng.normal(10, 1, size=(7, 10))
    b = rng.normal(0, 0.1, 5)
    batch = reconcile_linear_batch(X, S, A, b, B)
    for i in range(7):
        r = reconcile_linear(X[i], S, A, b, B)
        np.testing.assert_allclose(batch.x[i], r.x, atol=EXACT)
        np.testing.assert_allclose(batch.z[i], r.z, atol=1e-8)
        np.testing.assert_allclose(batch.y[i], r.y, atol=EXACT)
        assert batch.chi2[i] == pytest.approx(r.chi2, rel=1e-8, abs=1e-12)
    np.testing.assert_allclose(batch.x_cov, r.x_cov, atol=EXACT)
    np.testing.assert_allclose(batch.p_value, scipy.stats.chi2.sf(batch.chi2, batch.dof))


@pytest.mark.parametrize("with_b", [False, True])
def test_sparse_path_matches_dense(with_b):
    rng = np.random.default_rng(31)
    A = network(30, 70, rng)
    A = np.vstack([A, A[:3].sum(axis=0)])  # a dependent row
    x = rng.normal(40, 5, 70)
    S = np.diag(rng.uniform(0.3, 2, 70))
    B = network(31, 6, rng) * rng.uniform(0.5, 3.0, 6) if with_b else None
    dense = reconcile_linear(x, S, A, None, B)
    sparse = reconcile_linear(
        x, sp.csr_matrix(S), sp.csr_matrix(A), None, None if B is None else sp.csr_matrix(B)
    )
    assert sparse.method == "linear-sparse" and dense.method == "linear-dense"
    assert sparse.dof == dense.dof
    np.testing.assert_allclose(sparse.x, dense.x, atol=EXACT * 40)
    # Standard deviations of streams the balances fix are sqrt(round-off): compare the
    # covariances to EXACT (below) and the deviations to its square root.
    np.testing.assert_allclose(sparse.u_reconciled, dense.u_reconciled, atol=np.sqrt(EXACT))
    np.testing.assert_allclose(sparse.z, dense.z, atol=1e-8)
    np.testing.assert_array_equal(sparse.redundant, dense.redundant)
    assert sparse.chi2 == pytest.approx(dense.chi2, rel=1e-9)
    np.testing.assert_allclose(sparse.x_cov, dense.x_cov, atol=EXACT)
    if with_b:
        np.testing.assert_array_equal(sparse.observable, dense.observable)
        np.testing.assert_allclose(sparse.y, dense.y, atol=EXACT * 40)
        np.testing.assert_allclose(sparse.y_cov, dense.y_cov, atol=EXACT)
        np.testing.assert_allclose(sparse.y_u, dense.y_u, atol=np.sqrt(EXACT))


def test_sparse_correlated_covariance_matches_closed_form():
    rng = np.random.default_rng(12)
    A = network(8, 20, rng)
    x = rng.normal(10, 1, 20)
    S = np.diag(rng.uniform(0.5, 1.5, 20))
    S[0, 1] = S[1, 0] = 0.2  # one correlated pair
    r = reconcile_linear(x, sp.csr_matrix(S), sp.csr_matrix(A))
    xhat, cov, chi2 = closed_form(x, S, A, np.zeros(8))
    np.testing.assert_allclose(r.x, xhat, atol=EXACT)
    np.testing.assert_allclose(r.u_reconciled, np.sqrt(np.diag(cov)), atol=EXACT)


def test_ufloats_and_frame():
    rng = np.random.default_rng(1)
    A = network(3, 6, rng)
    S = random_spd(6, rng)
    r = reconcile_linear(rng.normal(5, 1, 6), S, A)
    import uncertainties

    vals = r.ufloats()
    cov = np.array(uncertainties.covariance_matrix(vals))
    # correlated_values rebuilds the matrix through an eigen-decomposition: ~1e-15
    # relative, 1e-10 absolute on entries of order 1.
    np.testing.assert_allclose(cov, r.x_cov, atol=1e-10)
    frame = r.to_frame(names=list("abcdef"))
    assert list(frame.columns) == [
        "name",
        "measured",
        "reconciled",
        "adjustment",
        "u_measured",
        "u_reconciled",
        "z",
        "redundant",
        "suspect",
    ]
    np.testing.assert_allclose(frame["u_measured"], np.sqrt(np.diag(S)))
    np.testing.assert_allclose(frame["adjustment"], r.x - r.x_measured)
    assert perftest.Reconciliation is type(r)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (
            {"cov": np.array([[1.0, 2.0], [2.0, 1.0]])},
            r"'cov' parameter of reconcile_linear must be symmetric positive definite\. "
            r"Got a matrix with eigenvalue -1",
        ),
        ({"cov": np.array([[1.0, 0.5], [0.1, 1.0]])}, "'cov' .* must be symmetric"),
        ({"cov": np.eye(3)}, r"'cov' .* shape \(2, 2\) .* Got shape \(3, 3\)"),
        ({"cov": np.diag([1.0, -1.0])}, "'cov' .* variance -1 at index 1"),
        ({"A": np.ones((1, 3))}, r"'A' .* Got shape \(1, 3\)"),
        ({"b": [0.0, 0.0]}, r"'b' .* \(A has shape \(1, 2\)\)\. Got shape \(2,\)"),
        ({"B": np.ones((3, 1))}, r"'B' .* \(A has shape \(1, 2\)\)\. Got shape \(3, 1\)"),
        ({"x": [1.0, np.nan]}, "'x' .* finite .* index 1"),
        ({"A": [[1.0, np.inf]]}, r"'A' .* finite .* index \(0, 1\)"),
    ],
)
def test_bad_input(kwargs, match):
    args = {"x": [1.0, 2.0], "cov": np.eye(2), "A": [[1.0, -1.0]], "b": None, "B": None}
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        reconcile_linear(**args)


def _closed_valve_network(n_pairs):
    """Pairs of streams: a header (x0 = x1 + x2, with x0 = x1 too) forces the branch
    x2 to zero, and the branch feeds a second stream (x2 = x3), so the whole row
    x2 - x3 = 0 is made of streams the balances force to zero."""
    n = 4 * n_pairs
    rows, cols, vals = [], [], []
    for k in range(n_pairs):
        i, r = 4 * k, 3 * k
        for row, col, val in (
            (r, i, 1.0), (r, i + 1, -1.0), (r, i + 2, -1.0),
            (r + 1, i, 1.0), (r + 1, i + 1, -1.0),
            (r + 2, i + 2, 1.0), (r + 2, i + 3, -1.0),
        ):  # fmt: skip
            rows.append(row)
            cols.append(col)
            vals.append(val)
    A = sp.csr_matrix((vals, (rows, cols)), shape=(3 * n_pairs, n))
    x = np.tile([100.0, 99.0, 0.5, 0.4], n_pairs)
    u = np.tile([1.0, 1.0, 0.1, 0.1], n_pairs)
    return x, u, A


@pytest.mark.parametrize("sparse", [False, True])
def test_stream_forced_to_zero_is_no_closure_alarm(monkeypatch, sparse):
    """A row whose streams the balances force to zero closes to round-off of the
    measured values; judged against its own round-off terms it looked open and the
    dense null-space fallback ran (a 2,000-stream solve 16x slower)."""
    import perftest.balance.linear as lin

    calls = []
    fallback = lin._solve_nullspace

    def spy(p, core):
        calls.append(p.x.size)
        return fallback(p, core)

    monkeypatch.setattr(lin, "_solve_nullspace", spy)
    x, u, A = _closed_valve_network(1 if not sparse else 500)
    cov = sp.diags(u**2).tocsr() if sparse else np.diag(u**2)
    r = reconcile_linear(x, cov, A if sparse else A.toarray())
    assert calls == []
    # Closed form: x0 = x1 = their mean (equal weights), x2 = x3 = 0.  Round-off of
    # the sums of ~100 [kg/s] is ~1e-14 * 100; 1e-10 absolute leaves margin.
    expected = np.tile([99.5, 99.5, 0.0, 0.0], x.size // 4)
    np.testing.assert_allclose(r.x, expected, rtol=0.0, atol=1e-10)
    # chi2 = (100 - 99)^2 / 2 + (0.5^2 + 0.4^2) / 0.01 per group of four
    assert r.chi2 == pytest.approx(x.size // 4 * (0.5 + 41.0), rel=EXACT)


# A ring of three nodes closed on itself: six measured streams and two unmeasured
# ones, each stream leaving one node and entering another, so the three node
# balances sum to zero identically.  Eliminating the two unmeasured streams leaves
# only that sum: no constraint at all on the measured ones (a combination of
# balances adds no redundancy; Narasimhan & Jordache, Data Reconciliation and Gross
# Error Detection, 2000, Ch. 3).  In floating point the sum leaves rounding of about
# 1e-17, which taken for a constraint moved a measurement by 19 of its standard
# uncertainties, with chi2 = 343 on one degree of freedom.  Invented numbers.
_RING_A = np.array(
    [[0.0, -1, 1, 1, 1, -1], [-1, 1, -1, -1, -1, 0], [1, 0, 0, 0, 0, 1]]
)  # fmt: skip
_RING_B = np.array([[-1.0, 0.0], [1.0, -1.0], [0.0, 1.0]])
_RING_X = np.array([36.50828773, 67.09465314, 34.59823888, 42.79164796, 55.70913163, 69.19189217])


@pytest.mark.parametrize("form", [np.asarray, sp.csr_matrix])
def test_balances_of_a_closed_ring_leave_no_redundancy(form):
    u = np.full(6, 2.0)
    with pytest.warns(ReconciliationWarning, match="no redundancy"):
        r = reconcile_linear(
            _RING_X, form(np.diag(u**2)), form(_RING_A), np.zeros(3), form(_RING_B)
        )
    assert r.dof == 0 and r.chi2 == 0.0 and r.p_value == 1.0
    np.testing.assert_array_equal(r.x, _RING_X)
    assert not r.redundant.any()


@pytest.mark.parametrize("form", [np.asarray, sp.csr_matrix])
def test_balances_of_a_closed_ring_that_do_not_sum_to_zero_contradict(form):
    """The same ring with a source in one balance: their sum reads 0 = 1."""
    u = np.full(6, 2.0)
    b = np.array([0.0, 0.0, 1.0])
    with pytest.raises(InputError, match="consistent"):
        reconcile_linear(_RING_X, form(np.diag(u**2)), form(_RING_A), b, form(_RING_B))


def test_degrees_of_freedom_of_random_flow_networks_against_svd_ranks():
    """400 random flow networks (2-24 nodes, coefficients of one or not, unmeasured
    streams observable or not): dof equals rank([A B]) - rank(B) from numpy's SVD
    (numpy.linalg.matrix_rank), and the dense and the sparse path agree on dof,
    observability, x and chi2.  Among them are 10 networks whose reduced rows all
    combine balances without measured variables: rows of rounding size alone, which
    the dense path took for one or two constraints (number 24 of this seed: dof 2,
    chi2 3457, a flow moved by 49 where nothing is redundant)."""
    rng = np.random.default_rng(7)
    for _ in range(400):
        A, un, me, u, x = random_flow_network(rng, 25, 4)
        B = A[:, un]
        dof = np.linalg.matrix_rank(A) - np.linalg.matrix_rank(B)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ReconciliationWarning)
            d = reconcile_linear(x, np.diag(u**2), A[:, me], B=B)
            s = reconcile_linear(x, sp.diags(u**2), sp.csr_matrix(A[:, me]), B=sp.csr_matrix(B))
        assert d.dof == s.dof == dof
        np.testing.assert_array_equal(d.observable, s.observable)
        assert np.all(np.abs(d.x - s.x) <= 1e-9 * u)
        assert d.chi2 == pytest.approx(s.chi2, rel=1e-9, abs=1e-9)
