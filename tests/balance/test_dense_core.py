"""The dense solve's variances of unmeasured variables and its deferred covariances.

Reference: the covariance of an affine estimate, GUM (JCGM 100:2008) eq. (13) in
matrix form: y_hat = c - T x_hat gives cov(y_hat) = T cov(x_hat) T^T; checked by
Monte Carlo with numpy below and against the formed matrices.
"""

from __future__ import annotations

import numpy as np
import pytest

from perftest.balance import reconcile_linear
from perftest.balance._core import Problem
from perftest.balance.linear import solve_dense


def _problem(rng, m, n, k):
    A = rng.normal(size=(m, n))
    B = rng.normal(size=(m, k))
    x = rng.normal(size=n) * 10.0
    s = rng.uniform(0.1, 2.0, n) ** 2
    b = A @ x + rng.normal(size=m)
    return Problem(x, np.diag(s), s, True, A, b, B, False)


@pytest.mark.parametrize("seed", range(4))
def test_y_variance_equals_the_formed_covariance(seed):
    rng = np.random.default_rng(seed)
    p = _problem(rng, 12, 9, 4)
    core = solve_dense(p)
    x_cov, y_cov, xy_cov = core.covariances()
    # the difference form loses at most ~1e3 ulps to cancellation (see _CANCEL)
    assert np.allclose(core.y_var, np.diag(y_cov), rtol=1e-11, atol=0.0)
    assert core.covariances()[0] is x_cov  # formed once, kept


def test_y_variance_when_reconciliation_takes_out_most_of_it(monkeypatch):
    """Two precise meters and a poor one; the unmeasured flow is fixed by the precise
    ones.  Its variance keeps its digits, by the difference form or (below _CANCEL of
    the prior, here forced) read from the formed covariance."""
    # node 1: x0 - x1 - y = 0 ; node 2: y - x2 = 0   (x2 poor, x0, x1 precise)
    A = np.array([[1.0, -1.0, 0.0], [0.0, 0.0, -1.0]])
    B = np.array([[-1.0], [1.0]])
    s = np.array([1e-6, 1e-6, 1e4])
    p = Problem(np.array([10.0, 4.0, 7.0]), np.diag(s), s, True, A, np.zeros(2), B, False)
    core = solve_dense(p)
    y_cov = core.covariances()[1]
    # var(x0 - x1) = 2e-6, less the little the poor meter adds (1e-6 relative)
    assert y_cov[0, 0] == pytest.approx(2e-6, rel=1e-9)
    assert core.y_var[0] == pytest.approx(y_cov[0, 0], rel=1e-12)
    import perftest.balance.linear as linear

    monkeypatch.setattr(linear, "_CANCEL", 1.0)
    core = solve_dense(p)
    assert core.y_var[0] == core.covariances()[1][0, 0]


def test_y_covariance_against_monte_carlo():
    """Reconciled values of many noisy draws scatter as the returned covariance says."""
    rng = np.random.default_rng(42)
    A = np.array([[1.0, -1.0, -1.0, 0.0], [0.0, 1.0, 0.0, -1.0], [0.0, 0.0, 1.0, 0.0]])
    B = np.array([[0.0], [0.0], [-1.0]])
    truth = np.array([10.0, 6.0, 4.0, 6.0])
    u = np.array([0.2, 0.1, 0.15, 0.1])
    ys = []
    for _ in range(4000):
        r = reconcile_linear(truth + u * rng.standard_normal(4), np.diag(u**2), A, None, B)
        ys.append(r.y[0])
    ref = reconcile_linear(truth, np.diag(u**2), A, None, B)
    # 4000 draws: the sample standard deviation is within ~3.5 % (3 sigma) of the truth
    assert np.std(ys, ddof=1) == pytest.approx(ref.y_u[0], rel=0.035)
    assert ref.y_u[0] ** 2 == pytest.approx(ref.y_cov[0, 0], rel=1e-12)


def test_deferred_statistics_are_the_same_numbers():
    """A solve that defers its statistics gives, once completed, exactly what a solve
    that computes them at once gives; the step is there before completion."""
    rng = np.random.default_rng(9)
    p = _problem(rng, 14, 10, 5)
    now = solve_dense(p)
    later = solve_dense(p, deferred=True)
    assert later.vdiag is None and later.finish is not None
    np.testing.assert_array_equal(later.xhat, now.xhat)
    np.testing.assert_array_equal(later.y, now.y)
    later.complete()
    np.testing.assert_array_equal(later.vdiag, now.vdiag)
    np.testing.assert_array_equal(later.redundant, now.redundant)
    np.testing.assert_array_equal(later.y_var, now.y_var)
    for a, b in zip(later.covariances(), now.covariances(), strict=True):
        np.testing.assert_array_equal(a, b)
    assert later.complete() is later and later.finish is None  # a second call: no-op


def _rank_deficient(rng, m, k, deficit, density=0.2):
    """A sparse plant-like B (m, k) whose last ``deficit`` columns repeat earlier ones
    (a pair of unmeasured variables that enters the balances only together); dense
    with ``density`` 1."""
    B = rng.normal(size=(m, k)) * (rng.random((m, k)) < density)
    for j in range(k):
        B[j % m, j] = 1.0 + rng.random()
    for t in range(deficit):
        B[:, k - 1 - t] = (t + 2.0) * B[:, t]
    return B


@pytest.mark.parametrize("m, k, deficit", [(40, 36, 3), (130, 126, 6), (12, 20, 0), (30, 10, 0)])
@pytest.mark.parametrize("density", [0.2, 1.0])
def test_reduction_for_a_final_solve_against_numpy_pinv(m, k, deficit, density):
    """The elimination of a final solve against the step solve's formed Q and G and
    against numpy's SVD.  The step's basis P of the left null space is project_out's
    to the last bit; the final solve's (the triangular structure of a sparse B, or the
    RZ decomposition of R1 for a dense one) spans the same space, orthonormal.  Its
    G is a generalised inverse that equals the minimum-norm pseudo-inverse
    numpy.linalg.pinv computes (Moore-Penrose; Golub & Van Loan, Matrix Computations,
    4th ed., Sec. 5.5) on the range of B: what the solve uses, since the reconciled
    values put the right-hand side in that range."""
    import scipy.linalg

    from perftest.balance import _dense

    rng = np.random.default_rng(m + k)
    Bt = _rank_deficient(rng, m, k, deficit, density)
    At = rng.normal(size=(m, 7))
    bt = rng.normal(size=m)
    step = _dense.reduce_constraints(Bt, At, bt)
    final = _dense.reduce_constraints(Bt, At, bt, final=True)
    proj = _dense.project_out_unmeasured(Bt)
    assert np.array_equal(step.P, proj.P)
    P0 = proj.P
    assert final.P.shape == P0.shape
    np.testing.assert_allclose(final.P @ final.P.T, np.eye(P0.shape[0]), atol=1e-12)
    np.testing.assert_allclose(final.P.T @ final.P, P0.T @ P0, atol=1e-12)
    # (rounding of the triangular solves, growing with the condition of B)
    np.testing.assert_allclose(final.PA, final.P @ At, rtol=0, atol=1e-11 * np.abs(At).max())
    np.testing.assert_allclose(final.Pb, final.P @ bt, rtol=0, atol=1e-11 * np.abs(bt).max())
    rank = m - P0.shape[0]
    structured = _dense.reduce_structured(Bt, At, bt) is not None
    assert structured == (_dense.triangular_structure(Bt) is not None)
    assert not (density == 1.0 and structured)  # a dense B has no row or column singleton
    assert step.exact and final.exact == (not structured and not 0 < rank < k)
    # G by SVD: rcond far below the rank decision's 1e-10 and far above rounding
    G = np.linalg.pinv(Bt, rcond=1e-12)
    scale = np.abs(G).max() * max(np.abs(At).max(), np.abs(bt).max())
    # backward-stable factorisations of a matrix of condition ~1e2-1e3: ~1e-12 of the
    # largest entry covers the rounding of both routes
    np.testing.assert_allclose(step.GA, G @ At, rtol=0, atol=1e-12 * scale)
    np.testing.assert_allclose(step.Gb, G @ bt, rtol=0, atol=1e-12 * scale)
    obs = proj.observable
    np.testing.assert_array_equal(step.observable, obs)
    np.testing.assert_array_equal(final.observable, obs)
    # the final route's G itself (applied to the identity), on the range of B
    Gf = _dense.reduce_constraints(Bt, np.eye(m), np.zeros(m), final=True).GA
    on_range = np.eye(m) - P0.T @ P0
    gscale = max(np.abs(G).max(), np.abs(Gf).max())
    np.testing.assert_allclose(Gf @ on_range, G, rtol=0, atol=1e-11 * gscale)
    np.testing.assert_allclose(Bt @ Gf @ on_range, on_range, rtol=0, atol=1e-11 * gscale)
    # observable: e_j in the row space of Bt, i.e. row j of an orthonormal null-space
    # basis (scipy.linalg.null_space, by SVD) vanishes; for a tall B exactly the
    # repeated pairs are not
    N = scipy.linalg.null_space(Bt, rcond=1e-12)
    np.testing.assert_array_equal(final.observable, np.linalg.norm(N, axis=1) < 1e-8)
    if m >= k:
        assert np.count_nonzero(~final.observable) == 2 * deficit
