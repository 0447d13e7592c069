"""The final solve's elimination of the unmeasured variables through the triangular
structure of B (``_dense.reduce_structured``).

References: a matrix whose rows and columns can be permuted to block triangular form
has the rank of its diagonal blocks, and its null spaces follow by block
substitution (I. S. Duff, A. M. Erisman, J. K. Reid, "Direct Methods for Sparse
Matrices", Oxford, 1986, Ch. 6, block triangular form); the spaces are checked against
scipy.linalg.null_space (SVD), the pseudo-inverse against numpy.linalg.pinv
(Moore-Penrose, Golub & Van Loan, Matrix Computations, 4th ed., Sec. 5.5), and the
whole solve against the route that factorises all of B.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

from perftest.balance import _dense, reconcile_linear


def _plant_like(rng, n_front, n_mid, k_mid, n_back, n_meas, deficit):
    """A B (m, k) with a triangular front (each row brings one new unmeasured
    variable), a middle block with ``deficit`` repeated column pairs (unmeasured
    variables that enter only together), a triangular back (each column enters one
    new row and earlier back rows) and ``n_meas`` rows without unmeasured variables;
    rows and columns shuffled.  Returns (B, blocks in the unshuffled order)."""
    k = n_front + k_mid + n_back
    m = n_front + n_mid + n_back + n_meas
    B = np.zeros((m, k))
    fc = np.arange(n_front)
    mc = n_front + np.arange(k_mid)
    kc = n_front + k_mid + np.arange(n_back)
    fr = np.arange(n_front)
    mr = n_front + np.arange(n_mid)
    kr = n_front + n_mid + np.arange(n_back)
    for t in range(n_front):  # row t: its own column and up to two earlier ones
        B[fr[t], fc[t]] = rng.choice([-1.0, 1.0]) * rng.uniform(0.5, 2.0)
        for j in rng.choice(t, size=min(t, 2), replace=False) if t else []:
            B[fr[t], fc[j]] = rng.normal()
    mid = rng.normal(size=(n_mid, k_mid)) * (rng.random((n_mid, k_mid)) < 0.4)
    for j in range(k_mid):  # at least two entries per middle column: no singleton
        mid[rng.choice(n_mid, size=2, replace=False), j] = rng.normal(size=2) + 2.0
    for t in range(deficit):
        mid[:, k_mid - 1 - t] = (t + 2.0) * mid[:, t]
    B[np.ix_(mr, mc)] = mid
    B[np.ix_(mr, fc)] = rng.normal(size=(n_mid, n_front)) * (rng.random((n_mid, n_front)) < 0.2)
    for t in range(n_back):  # column t: its own row and up to two earlier back rows
        B[kr[t], kc[t]] = rng.choice([-1.0, 1.0]) * rng.uniform(0.5, 2.0)
        for i in rng.choice(t, size=min(t, 2), replace=False) if t else []:
            B[kr[i], kc[t]] = rng.normal()
        B[kr[t], mc[rng.integers(k_mid)]] = rng.normal()
        if n_front:
            B[kr[t], fc[rng.integers(n_front)]] = rng.normal()
    rp, cp = rng.permutation(m), rng.permutation(k)
    return B[rp][:, cp]


CASES = [(8, 10, 8, 6, 3, 0), (8, 10, 8, 6, 3, 2), (20, 30, 24, 15, 5, 3), (0, 10, 8, 6, 0, 1)]


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("seed", range(3))
def test_structure_is_block_triangular(case, seed):
    rng = np.random.default_rng(seed)
    B = _plant_like(rng, *case)
    fr, fc, mr, mc, kr, kc = _dense.triangular_structure(B)
    m, k = B.shape
    assert sorted(np.concatenate([fr, mr, kr]).tolist()) == list(range(m))
    assert sorted(np.concatenate([fc, mc, kc]).tolist()) == list(range(k))
    assert fr.size == fc.size and kr.size == kc.size
    L, U = B[np.ix_(fr, fc)], B[np.ix_(kr, kc)]
    assert np.all(np.diag(L) != 0) and not np.any(np.triu(L, 1))
    assert np.all(np.diag(U) != 0) and not np.any(np.tril(U, -1))
    for rows, cols in ((fr, mc), (fr, kc), (mr, kc)):  # the zero blocks
        assert not np.any(B[np.ix_(rows, cols)])
    # what is left has no row or column with a single nonzero
    mid = B[np.ix_(mr, mc)] != 0
    assert not np.any(mid.sum(axis=1) == 1) and not np.any(mid.sum(axis=0) == 1)


def test_structure_of_a_matrix_without_singletons_is_none():
    rng = np.random.default_rng(5)
    assert _dense.triangular_structure(rng.normal(size=(6, 5))) is None


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("seed", range(3))
def test_spaces_and_pseudo_inverse_against_svd(case, seed):
    """Left null space, null space (observability) and G on the range of B."""
    rng = np.random.default_rng(100 + seed)
    B = _plant_like(rng, *case)
    m, k = B.shape
    A = rng.normal(size=(m, 5))
    b = rng.normal(size=m)
    red = _dense.reduce_structured(B, A, b)
    assert red is not None and not red.exact
    left = scipy.linalg.null_space(B.T, rcond=1e-12)  # (m, m - rank)
    assert red.P.shape == (left.shape[1], m)
    np.testing.assert_allclose(red.P @ red.P.T, np.eye(left.shape[1]), atol=1e-12)
    np.testing.assert_allclose(red.P.T @ red.P, left @ left.T, atol=1e-11)
    # the reduced rows from the middle block alone: P [A | b] to rounding
    np.testing.assert_allclose(red.PA, red.P @ A, rtol=0, atol=1e-13 * np.abs(A).max())
    np.testing.assert_allclose(red.Pb, red.P @ b, rtol=0, atol=1e-13 * np.abs(b).max())
    N = scipy.linalg.null_space(B, rcond=1e-12)
    obs = np.linalg.norm(N, axis=1) < 1e-8
    np.testing.assert_array_equal(red.observable, obs)
    assert np.count_nonzero(~obs) >= 2 * case[-1]  # the repeated pairs at least
    # G on the range of B: the Moore-Penrose inverse's (minimum norm, for the
    # unobservable variables as well)
    G = np.linalg.pinv(B, rcond=1e-12)
    Gs = _dense.reduce_structured(B, np.eye(m), np.zeros(m)).GA
    on_range = np.eye(m) - left @ left.T
    scale = max(np.abs(G).max(), np.abs(Gs).max())
    np.testing.assert_allclose(Gs @ on_range, G, rtol=0, atol=1e-11 * scale)
    np.testing.assert_allclose(red.GA, Gs @ A, rtol=0, atol=1e-11 * scale * np.abs(A).max())


def test_ill_conditioned_triangular_block_is_left_to_the_whole_factorisation():
    """A chain whose triangular factor grows like 10^t (each row: -10 times the last
    variable plus the new one) has a condition number far beyond TRIANGULAR_RCOND:
    the structured route declines, the caller factorises all of B."""
    n = 12
    B = np.eye(n + 2, n)
    for t in range(1, n):
        B[t, t - 1] = -10.0
    B[n, :] = 1.0  # two dense rows: the chain is the front, these the middle
    B[n + 1, ::2] = 1.0
    assert _dense.triangular_structure(B) is not None
    A = np.ones((n + 2, 2))
    assert _dense.reduce_structured(B, A, np.zeros(n + 2)) is None
    red = _dense.reduce_constraints(B, A, np.zeros(n + 2), final=True)
    assert red.P.shape == (2, n + 2)


@pytest.mark.parametrize("seed", range(4))
def test_reconciliation_equals_the_whole_factorisation(seed, monkeypatch):
    """reconcile_linear through the structured route and through the pivoted QR of
    all of B: the same estimates, statistics, covariances and nodal rows to rounding."""
    rng = np.random.default_rng(200 + seed)
    B = _plant_like(rng, 10, 14, 12, 8, 4, seed % 3)
    m, k = B.shape
    n = 3 * m // 2
    A = rng.normal(size=(m, n)) * (rng.random((m, n)) < 0.15)
    A[np.arange(m), rng.integers(n, size=m)] = 1.0
    xt = rng.normal(size=n) * 10
    yt = rng.normal(size=k) * 10
    b = A @ xt + B @ yt
    u = rng.uniform(0.05, 0.5, n)
    x = xt + rng.normal(size=n) * u
    fast = reconcile_linear(x, np.diag(u**2), A, b, B)
    monkeypatch.setattr(_dense, "reduce_structured", lambda *a: None)
    ref = reconcile_linear(x, np.diag(u**2), A, b, B)
    assert fast.dof == ref.dof and fast.dof > 0
    np.testing.assert_array_equal(fast.observable, ref.observable)
    np.testing.assert_array_equal(fast.redundant, ref.redundant)
    np.testing.assert_allclose(fast.x, ref.x, rtol=0, atol=1e-11 * u.min())
    assert fast.chi2 == pytest.approx(ref.chi2, rel=1e-11)
    obs = ref.observable
    np.testing.assert_allclose(fast.y[obs], ref.y[obs], rtol=1e-10, atol=1e-10)
    np.testing.assert_allclose(fast.y_u[obs], ref.y_u[obs], rtol=1e-9)
    np.testing.assert_allclose(fast.u_reconciled, ref.u_reconciled, rtol=1e-11)
    np.testing.assert_allclose(fast.x_cov, ref.x_cov, rtol=0, atol=1e-12 * u.max() ** 2)
    np.testing.assert_array_equal(fast.constraint_rows, ref.constraint_rows)
    np.testing.assert_allclose(
        fast.constraint_residual, ref.constraint_residual, rtol=1e-10, atol=1e-10
    )
    np.testing.assert_allclose(fast.constraint_u, ref.constraint_u, rtol=1e-10)


@pytest.mark.parametrize("seed", range(4))
def test_equilibration_from_the_nonzeros_equals_the_dense_one(seed):
    """A large, mostly zero B is equilibrated from its nonzero entries (``nonzero_positions``):
    the same row weights and column scales to the last bit as the passes over all of
    B (maxima are exact), empty rows and columns included; and its pattern handed to
    the structured reduction gives the blocks of the scan."""
    from perftest.balance import _kkt, linear

    rng = np.random.default_rng(40 + seed)
    B = _plant_like(rng, 60, 30, 28, 6, 20, deficit=2)
    m, k = B.shape
    B[:, 5] = 0.0  # an unmeasured variable in no balance
    A = np.zeros((m, 40))
    for i in range(m):
        A[i, rng.choice(40, size=2, replace=False)] = rng.normal(size=2)
    u = rng.uniform(0.1, 2.0, 40)
    flat = _kkt.nonzero_positions(B)
    assert flat is not None and m * k >= _kkt.NONZERO_MIN
    for a, b in zip(
        linear._equilibrate_dense(A, B, u, flat), linear._equilibrate_dense(A, B, u), strict=True
    ):
        np.testing.assert_array_equal(a, b)
    w, colB = linear._equilibrate_dense(A, B, u)
    Bt = B * w[:, None] / colB
    _dense._last_triangular = None
    scanned = _dense.triangular_structure(Bt)
    _dense._last_triangular = None
    given = _dense.triangular_structure(Bt, flat)
    for a, b in zip(given, scanned, strict=True):
        np.testing.assert_array_equal(a, b)
    assert _kkt.nonzero_positions(rng.normal(size=(80, 80))) is None  # dense
    assert _kkt.nonzero_positions(np.eye(10)) is None  # small
