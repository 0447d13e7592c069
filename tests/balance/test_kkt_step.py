"""The step of the nonlinear engine: dense and sparse factorisations agree.

Reference: the step solves the KKT system of weighted least squares under linear
constraints (Nocedal & Wright, Numerical Optimization, 2nd ed., Sec. 16.1); it is
checked against numpy's dense solve of that system, and the condition estimate
against LAPACK's ``dgecon`` (the same Hager-Higham estimator, ACM TOMS 14(4), 1988).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg.lapack import dgecon, dgetrf

from perftest.balance import _kkt


def _problem(rng, m, n, k, per_row=3):
    """A sparse plant-like linearised problem: every row a few entries."""
    Jx = np.zeros((m, n))
    Jy = np.zeros((m, k))
    for i in range(m):
        Jx[i, rng.choice(n, size=min(per_row, n), replace=False)] = rng.normal(size=min(per_row, n))
        Jy[i, rng.choice(k, size=min(per_row, k), replace=False)] = rng.normal(size=min(per_row, k))
    # every y in at least one row, every row a measured entry
    for j in range(k):
        Jy[j % m, j] = 1.0 + rng.random()
    sdiag = rng.uniform(0.5, 2.0, n) ** 2
    xm = rng.normal(size=n)
    xk = xm + 0.1 * rng.normal(size=n)
    fk = rng.normal(size=m)
    ysize = rng.uniform(0.5, 3.0, k)
    return Jx, Jy, sdiag, xm, xk, fk, ysize


def _exact(Jx, Jy, sdiag, xm, xk, fk):
    """min 1/2 |x - xm|^2_S^-1 s.t. fk + Jx (x - xk) + Jy dy = 0, by numpy's dense solve."""
    n, k = Jx.shape[1], Jy.shape[1]
    m = fk.size
    K = np.zeros((n + k + m, n + k + m))
    K[:n, :n] = np.diag(1.0 / sdiag)
    K[:n, n + k :] = Jx.T
    K[n : n + k, n + k :] = Jy.T
    K[n + k :, :n] = Jx
    K[n + k :, n : n + k] = Jy
    rhs = np.concatenate([xm / sdiag, np.zeros(k), Jx @ xk - fk])
    z = np.linalg.solve(K, rhs)
    return z[:n] - xk, z[n : n + k]


@pytest.mark.parametrize("m, n, k", [(30, 25, 20), (130, 60, 126)])
def test_step_against_dense_kkt(m, n, k):
    """Small systems go through LAPACK, large ones (>= SPARSE_STEP_MIN) through SuperLU:
    both give the exact step of the linearised problem."""
    rng = np.random.default_rng(m)
    Jx, Jy, sdiag, xm, xk, fk, ysize = _problem(rng, m, n, k)
    out = _kkt.kkt_step(Jx, Jy, np.diag(sdiag), sdiag, True, xk, xm, fk, ysize)
    assert out is not None
    dx, dy, lam, regular = out
    assert regular
    dx_ref, dy_ref = _exact(Jx, Jy, sdiag, xm, xk, fk)
    # 1e-9 relative: both are backward-stable solves of a system with condition ~1e3-1e5
    assert np.allclose(dx, dx_ref, rtol=1e-9, atol=1e-9 * np.abs(dx_ref).max())
    assert np.allclose(dy, dy_ref, rtol=1e-9, atol=1e-9 * np.abs(dy_ref).max())
    # the multipliers satisfy stationarity in x: x - xm = -S Jx^T lam
    assert np.allclose(xk + dx - xm, -sdiag * (Jx.T @ lam), atol=1e-9 * np.abs(dx).max())


def test_sparse_and_dense_factor_give_the_same_step():
    rng = np.random.default_rng(5)
    m, n, k = 140, 70, 120
    Jx, Jy, sdiag, xm, xk, fk, ysize = _problem(rng, m, n, k)
    Ms = (Jx * sdiag) @ Jx.T
    Jys = Jy * ysize
    rhs = rng.normal(size=m + k)
    for delta in (0.0, _kkt.DELTA):
        a = _kkt._DenseSolve(Ms, Jys)(delta, rhs, _kkt.RCOND_MIN)
        b = _kkt._SparseSolve(Ms, Jys)(delta, rhs, _kkt.RCOND_MIN)
        # backward-stable solves of the same matrix: agree to ~cond * eps
        assert np.allclose(a, b, rtol=1e-8, atol=1e-8 * np.abs(a).max())


def _factor(K):
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    return spla.splu(sp.csc_matrix(K), permc_spec="COLAMD")


def _known_condition(rng, n, cond_exp):
    """A random n x n matrix with singular values from 1 down to 10**-cond_exp, its
    1-norm and LAPACK dgecon's reciprocal condition number (the reference)."""
    U, _ = np.linalg.qr(rng.normal(size=(n, n)))
    V, _ = np.linalg.qr(rng.normal(size=(n, n)))
    K = U @ np.diag(np.logspace(0, -cond_exp, n)) @ V.T
    anorm = np.abs(K).sum(axis=0).max()
    lu, _, _ = dgetrf(K.copy())
    ref, _ = dgecon(lu, anorm, norm="1")
    return K, anorm, ref


@pytest.mark.parametrize("cond_exp", [0, 3, 6, 9, 12])
def test_condition_estimate_against_lapack(cond_exp):
    """The estimate is the 1-norm estimator of LAPACK dgecon: it agrees with dgecon
    within a factor of 3 (Higham 1988: the estimate is a lower bound of ||K^-1||_1,
    almost always within a factor of 3), on matrices of known condition."""
    n = 60
    K, anorm, ref = _known_condition(np.random.default_rng(cond_exp), n, cond_exp)
    est = _kkt._rcond_estimate(_factor(K), anorm, n)
    assert ref / 3.0 <= est <= ref * 3.0


@pytest.mark.parametrize("weak", [0.0, 1e-13])
def test_singular_system_is_refused_by_the_sparse_factor(weak):
    """A y column that no row determines (exactly, or but for a rounding-size entry):
    the factor is singular or nearly so and the solver returns None, as the dense one
    does, so the caller regularises."""
    rng = np.random.default_rng(11)
    m, n, k = 130, 60, 126
    Jx, Jy, sdiag, *_ = _problem(rng, m, n, k)
    Jy[:, 7] = 0.0  # y_7 enters no balance ...
    Jy[3, 7] = weak  # ... or with a coefficient at rounding level
    Ms = (Jx * sdiag) @ Jx.T
    rhs = rng.normal(size=m + k)
    assert _kkt._SparseSolve(Ms, Jy)(0.0, rhs, _kkt.RCOND_REGULAR) is None
    assert _kkt._DenseSolve(Ms, Jy)(0.0, rhs, _kkt.RCOND_REGULAR) is None
    # regularised, both factor it and agree
    a = _kkt._DenseSolve(Ms, Jy)(_kkt.DELTA, rhs, _kkt.RCOND_MIN)
    b = _kkt._SparseSolve(Ms, Jy)(_kkt.DELTA, rhs, _kkt.RCOND_MIN)
    assert a is not None and b is not None
    # regularised condition ~1e6: agreement to ~1e-8 relative
    assert np.allclose(a, b, rtol=1e-7, atol=1e-7 * np.abs(a).max())


@pytest.mark.parametrize("seed", range(3))
def test_gram_from_nonzero_pairs_equals_the_dense_product(seed):
    """J S J^T summed from each column's nonzero pairs equals the dense product to
    rounding (numpy's matmul as the reference), exactly symmetric; empty and
    one-entry columns included."""
    rng = np.random.default_rng(seed)
    m, n = 90, 120
    J = np.zeros((m, n))
    for c in range(n):
        k = c % 4  # 0 to 3 entries per column
        J[rng.choice(m, size=k, replace=False), c] = rng.normal(size=k)
    s = rng.uniform(0.1, 3.0, n)
    G = _kkt._gram(J, s)
    assert G is not None
    ref = (J * s) @ J.T
    # a handful of products per entry: agreement to a few ulps of the largest entry
    assert np.allclose(G, ref, rtol=0.0, atol=1e-14 * np.abs(ref).max())
    assert np.array_equal(G, G.T)
    # the nonzero entries alone (row-major) and the diagonal: the same numbers, twice
    # (the cells are laid out on the first call and kept)
    J[:, 0] = 0.0
    J[[3, 7], 0] = [2.0, 3.0]
    J[[3, 7], 1] = [3.0, -2.0]  # cell (3, 7) cancels exactly: left out, as a zero is
    G = _kkt._gram(J, np.ones(n))
    assert G[3, 7] == 0.0
    for _ in range(2):
        rows, cols, vals, diag = _kkt._gram(J, np.ones(n), entries=True)
        nz = np.flatnonzero(G.ravel() != 0.0)
        np.testing.assert_array_equal(rows * m + cols, nz)
        np.testing.assert_array_equal(vals, G.ravel()[nz])
        np.testing.assert_array_equal(diag, np.diag(G))


def test_gram_leaves_small_or_dense_matrices_to_the_dense_product():
    rng = np.random.default_rng(1)
    assert _kkt._gram(rng.normal(size=(20, 20)), np.ones(20)) is None  # small
    assert _kkt._gram(rng.normal(size=(100, 100)), np.ones(100)) is None  # dense


@pytest.mark.parametrize("cond_exp", [2, 6, 9, 12])
def test_early_accepted_condition_estimate_keeps_lapacks_verdict(cond_exp):
    """Stopping the estimate after its first step (accept_above) changes no verdict
    against a bound: a matrix accepted early is well inside the bound by LAPACK's
    dgecon too, and an ill-conditioned one is not accepted early."""
    n = 80
    K, anorm, ref = _known_condition(np.random.default_rng(100 + cond_exp), n, cond_exp)
    bound = _kkt.RCOND_REGULAR
    est = _kkt._rcond_estimate(_factor(K), anorm, n, bound)
    assert (est > bound) == (ref > bound)
    if est > _kkt.EARLY_MARGIN * bound:  # accepted early: dgecon agrees, far inside
        assert ref > 10.0 * bound


def test_structurally_singular_system_skips_the_regular_factorisation(monkeypatch):
    """Two unmeasured variables that enter one balance only, and only that one (y_7 and
    y_8 in row 4), leave J_y with structural column rank below k (maximum bipartite
    matching, scipy.sparse.csgraph: two columns, one row), so the unregularised KKT
    matrix is singular whatever its values: the step skips that factorisation and
    is, to the last bit, the step taken after trying it."""
    rng = np.random.default_rng(3)
    m, n, k = 130, 60, 126
    Jx, Jy, sdiag, xm, xk, fk, ysize = _problem(rng, m, n, k)
    Jy[:, 7:9] = 0.0
    Jy[4, 7:9] = [1.0, 2.0]
    Ms = (Jx * sdiag) @ Jx.T
    assert _kkt._SparseSolve(Ms, Jy).structurally_singular()
    assert not _kkt._SparseSolve(Ms, _problem(rng, m, n, k)[1]).structurally_singular()
    calls = []
    solve = _kkt._SparseSolve.__call__

    def counted(self, delta, rhs, rcond_min):
        calls.append(delta)
        return solve(self, delta, rhs, rcond_min)

    monkeypatch.setattr(_kkt._SparseSolve, "__call__", counted)
    out = _kkt.kkt_step(Jx, Jy, np.diag(sdiag), sdiag, True, xk, xm, fk, ysize)
    assert calls == [_kkt.DELTA]  # the regular try skipped
    monkeypatch.setattr(_kkt._SparseSolve, "structurally_singular", lambda self: False)
    calls.clear()
    ref = _kkt.kkt_step(Jx, Jy, np.diag(sdiag), sdiag, True, xk, xm, fk, ysize)
    assert calls == [0.0, _kkt.DELTA]  # tried, refused as not regular, regularised
    assert out is not None and ref is not None and out[3] is False and ref[3] is False
    for a, b in zip(out[:3], ref[:3], strict=True):
        np.testing.assert_array_equal(a, b)


def _kkt_dense(Ms, Jys, delta):
    """The scaled KKT matrix [[Ms, -Jys], [-Jys^T, -delta I]] as a dense array."""
    m, k = Jys.shape
    K = np.zeros((m + k, m + k))
    K[:m, :m] = Ms
    K[:m, m:] = -Jys
    K[m:, :m] = -Jys.T
    K[m:, m:] = -delta * np.eye(k)
    return K


def test_kept_csc_layout_builds_the_kkt_matrix_of_each_pattern(monkeypatch):
    """The CSC layout of a KKT pattern is kept for the next step with the same pattern:
    filled with new values it gives the matrix of those values (against a dense array
    of the definition), in scipy's canonical form (rows sorted within each column), and
    a new pattern gets a layout of its own."""
    import scipy.sparse as sp

    rng = np.random.default_rng(11)
    m, n, k = 130, 60, 126
    Jx, Jy, sdiag, *_ = _problem(rng, m, n, k)
    Ms = (Jx * sdiag) @ Jx.T
    monkeypatch.setattr(_kkt, "_last_layout", None)  # (whatever an earlier test factorised)

    def built(solver, delta):
        order, indices, indptr, cols, perm, _ = solver._layout(bool(delta))
        assert perm is None  # no factorisation of these patterns yet: natural order
        vals = solver._vals
        if delta:
            vals = np.concatenate([vals, np.full(k, -delta)])
        A = sp.csc_matrix((vals[order], indices, indptr), shape=(m + k, m + k))
        # the column of each stored entry, as the condition estimate's column sums use it
        np.testing.assert_array_equal(cols, np.repeat(np.arange(m + k), np.diff(indptr)))
        return A

    first = _kkt._SparseSolve(Ms, Jy)
    for delta in (0.0, _kkt.DELTA):
        A = built(first, delta)
        np.testing.assert_array_equal(A.toarray(), _kkt_dense(Ms, Jy, delta))
        bounds = zip(A.indptr[:-1], A.indptr[1:], strict=True)
        assert all(np.all(np.diff(A.indices[a:b]) > 0) for a, b in bounds)
    # same pattern, other values: the same layout, the new matrix
    again = _kkt._SparseSolve(2.0 * Ms, 3.0 * Jy)
    assert again._layout(True) is first._layout(True)
    np.testing.assert_array_equal(
        built(again, _kkt.DELTA).toarray(), _kkt_dense(2.0 * Ms, 3.0 * Jy, _kkt.DELTA)
    )
    # one entry more in J_y: a new layout, and the matrix of the new pattern
    Jy2 = Jy.copy()
    Jy2[0, np.flatnonzero(Jy[0] == 0.0)[0]] = 0.5
    other = _kkt._SparseSolve(Ms, Jy2)
    assert other._layout(True) is not first._layout(True)
    np.testing.assert_array_equal(
        built(other, _kkt.DELTA).toarray(), _kkt_dense(Ms, Jy2, _kkt.DELTA)
    )


def test_kept_ordering_gives_the_factor_of_a_fresh_ordering(monkeypatch):
    """The column ordering of a KKT pattern (SuperLU's COLAMD, which depends on the
    pattern alone) is found once and kept: every matrix of that pattern is laid out
    in that order and factorised without ordering.  Its solutions, plain and
    transposed, and its condition estimate are those of a fresh COLAMD factor of the
    same matrix to the last bit (SuperLU itself, scipy.sparse.linalg.splu; random
    values, so no two pivot candidates tie), and the solutions solve the system
    (numpy's dense solve).  A new pattern starts without an ordering."""
    import scipy.sparse as sp
    import scipy.sparse.linalg as spla

    rng = np.random.default_rng(12)
    m, n, k = 130, 60, 126
    Jx, Jy, sdiag, *_ = _problem(rng, m, n, k)
    Ms = (Jx * sdiag) @ Jx.T
    rhs = rng.normal(size=m + k)
    monkeypatch.setattr(_kkt, "_last_layout", None)  # (whatever an earlier test factorised)
    for delta in (_kkt.DELTA, 0.0):
        first = _kkt._SparseSolve(Ms, Jy)
        assert first._layout(bool(delta))[4] is None
        assert first(delta, rhs, _kkt.RCOND_MIN) is not None
        perm = first._layout(bool(delta))[4]
        K = sp.csc_matrix(_kkt_dense(Ms, Jy, delta))
        options = dict(relax=_kkt.SUPERLU_RELAX, panel_size=_kkt.SUPERLU_PANEL)
        np.testing.assert_array_equal(perm, spla.splu(K, permc_spec="COLAMD", **options).perm_c)
        # other values, the same pattern: laid out in the kept order
        Ms2, Jy2 = Ms * rng.uniform(0.5, 2.0, Ms.shape), Jy * rng.uniform(0.5, 2.0, Jy.shape)
        Ms2 = Ms2 + Ms2.T  # (symmetric, as M is)
        again = _kkt._SparseSolve(Ms2, Jy2)
        order, indices, indptr, cols, kept, _ = again._layout(bool(delta))
        assert kept is perm
        K2 = _kkt_dense(Ms2, Jy2, delta)
        vals = again._vals if not delta else np.concatenate([again._vals, np.full(k, -delta)])
        B = sp.csc_matrix((vals[order], indices, indptr), shape=K2.shape)
        np.testing.assert_array_equal(B.toarray()[:, perm], K2)  # column i at perm[i]
        sol = again(delta, rhs, _kkt.RCOND_MIN)
        fresh = spla.splu(sp.csc_matrix(K2), permc_spec="COLAMD", **options)
        np.testing.assert_array_equal(sol, fresh.solve(rhs))
        np.testing.assert_array_equal(again.last(rhs[::-1].copy()), fresh.solve(rhs[::-1].copy()))
        np.testing.assert_array_equal(again._lu.solve(rhs, trans="T"), fresh.solve(rhs, trans="T"))
        anorm = float(np.abs(K2).sum(axis=0).max())
        assert _kkt._rcond_estimate(again._lu, anorm, m + k) == _kkt._rcond_estimate(
            fresh, anorm, m + k
        )
        np.testing.assert_allclose(K2 @ sol, rhs, rtol=0, atol=1e-8 * np.abs(rhs).max())
        np.testing.assert_allclose(
            K2.T @ again._lu.solve(rhs, trans="T"), rhs, rtol=0, atol=1e-8 * np.abs(rhs).max()
        )
    # one entry more in J_y: a new pattern, no ordering yet
    Jy3 = Jy.copy()
    Jy3[0, np.flatnonzero(Jy[0] == 0.0)[0]] = 0.5
    assert _kkt._SparseSolve(Ms, Jy3)._layout(False)[4] is None


@pytest.mark.parametrize("m, n, k", [(30, 25, 20), (130, 60, 126)])
@pytest.mark.parametrize("singular", [None, "fixed", "turning"])
def test_step_from_a_kept_factor_against_dense_kkt(m, n, k, singular):
    """The factor of one iterate, kept (Reuse), gives the step of a nearby iterate's
    system by iterative refinement, without a factorisation of its own, to the
    accuracy asked (against numpy's dense solve of that system).  With two unmeasured
    variables that enter one balance only, together (not observable: the
    regularised system), it does so while their ratio stays (the free direction
    stays); where the ratio changes, the kept factor's free direction is not the
    system's, the refinement does not converge and a fresh factor gives the step."""
    rng = np.random.default_rng(m + 7)
    Jx, Jy, sdiag, xm, xk, fk, ysize = _problem(rng, m, n, k)
    if singular:
        Jy[:, 7:9] = 0.0
        Jy[4, 7:9] = [1.0, 2.0]
    S = np.diag(sdiag)
    reuse = _kkt.Reuse(1e-12)
    first = _kkt.kkt_step(Jx, Jy, S, sdiag, True, xk, xm, fk, ysize, reuse=reuse)
    assert first is not None and reuse.factor is not None
    kept = reuse.factor
    # the next iterate: Jacobians moved by 1e-3 relative, a smaller residual
    Jx2 = Jx * (1.0 + 1e-3 * rng.normal(size=Jx.shape))
    Jy2 = Jy * (1.0 + 1e-3 * rng.normal(size=Jy.shape))
    if singular == "fixed":
        Jy2[4, 7:9] = Jy[4, 7:9] * 1.001
    xk2, fk2 = xk + first[0], 1e-2 * fk
    out = _kkt.kkt_step(Jx2, Jy2, S, sdiag, True, xk2, xm, fk2, ysize, reuse=reuse)
    fresh = _kkt.kkt_step(Jx2, Jy2, S, sdiag, True, xk2, xm, fk2, ysize)
    assert out is not None and fresh is not None and out[3] == fresh[3] == (not singular)
    if singular == "turning":
        assert reuse.factor is not kept  # refused: factorised anew
        for a, b in zip(out, fresh, strict=True):
            np.testing.assert_array_equal(a, b)
        return
    assert reuse.factor is kept  # no new factor
    u = np.sqrt(sdiag)
    # the refinement's target, 1e-12 (scaled, and standard deviations of the
    # linearised residuals); a scaled multiplier moves x by at most its rows' count
    assert np.abs((out[0] - fresh[0]) / u).max() <= 10 * 1e-12
    assert np.abs((out[1] - fresh[1]) / ysize).max() <= 10 * 1e-12
    lin = fk2 + Jx2 @ out[0] + Jy2 @ out[1]
    assert np.abs(lin / np.sqrt((Jx2 * Jx2) @ sdiag)).max() <= 1e-10
    if not singular:
        dx_ref, dy_ref = _exact(Jx2, Jy2, sdiag, xm, xk2, fk2)
        assert np.abs((out[0] - dx_ref) / u).max() <= 1e-9


def test_kept_factor_of_a_distant_iterate_is_replaced(refine_calls):
    """Where the kept factor no longer contracts the refinement (a system changed by
    half its size), the step is factorised anew, the new factor kept, and the step
    is the fresh one to the last bit."""
    rng = np.random.default_rng(17)
    Jx, Jy, sdiag, xm, xk, fk, ysize = _problem(rng, 130, 60, 126)
    S = np.diag(sdiag)
    reuse = _kkt.Reuse(1e-12)
    _kkt.kkt_step(Jx, Jy, S, sdiag, True, xk, xm, fk, ysize, reuse=reuse)
    kept = reuse.factor
    Jx2 = Jx * (1.0 + 0.5 * rng.normal(size=Jx.shape))
    Jy2 = Jy * (1.0 + 0.5 * rng.normal(size=Jy.shape))
    out = _kkt.kkt_step(Jx2, Jy2, S, sdiag, True, xk, xm, fk, ysize, reuse=reuse)
    assert refine_calls == [False] and reuse.factor is not kept
    fresh = _kkt.kkt_step(Jx2, Jy2, S, sdiag, True, xk, xm, fk, ysize)
    for a, b in zip(out, fresh, strict=True):
        np.testing.assert_array_equal(a, b)
