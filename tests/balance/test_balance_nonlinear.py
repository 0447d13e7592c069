"""Nonlinear reconciliation checked against scipy.optimize and the linear closed form."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.optimize
import scipy.sparse as sp

from perftest.balance import nodal_test, reconcile_linear, reconcile_nonlinear
from perftest.errors import ConvergenceError, InputError

# A mixer with an energy balance: streams 0, 1 in, 2 out; mass flows m and
# specific enthalpies h.  x = (m0, m1, m2, h0, h1, h2) measured, or h2 unmeasured.
X_MIX = np.array([10.3, 5.1, 15.0, 100.0, 300.0, 170.0])
U_MIX = np.array([0.2, 0.1, 0.3, 2.0, 3.0, 2.5])


def mixer(x, y):
    m0, m1, m2, h0, h1, h2 = x
    return np.array([m0 + m1 - m2, m0 * h0 + m1 * h1 - m2 * h2])


def mixer_jac(x, y):
    m0, m1, m2, h0, h1, h2 = x
    Jx = np.array([[1.0, 1.0, -1.0, 0, 0, 0], [h0, h1, -h2, m0, m1, -m2]])
    return Jx, np.zeros((2, 0))


def slsqp(fun_obj, start, cons):
    opt = scipy.optimize.minimize(
        fun_obj,
        start,
        constraints=[{"type": "eq", "fun": cons}],
        method="SLSQP",
        options={"ftol": 1e-15, "maxiter": 1000},
    )
    assert opt.success, opt.message
    return opt


def test_mixer_against_slsqp():
    r = reconcile_nonlinear(mixer, X_MIX, np.diag(U_MIX**2))
    assert r.converged and r.method == "nonlinear"
    opt = slsqp(lambda v: np.sum(((v - X_MIX) / U_MIX) ** 2), X_MIX, lambda v: mixer(v, None))
    # SLSQP with ftol 1e-15 locates the minimiser to ~sqrt(1e-15) ~ 3e-8 in units of
    # the uncertainties (0.1 - 3 here); 1e-5 absolute is a safe margin.
    np.testing.assert_allclose(r.x, opt.x, atol=1e-5)
    # chi2 is the objective at the solution.
    assert r.chi2 == pytest.approx(opt.fun, rel=1e-6)
    assert r.dof == 2
    assert r.residual_norm < 1e-8


# trust-constr warns that its quasi-Newton update sees a linear function (the mass
# balance); harmless here.
@pytest.mark.filterwarnings("ignore:delta_grad == 0.0")
def test_mixer_with_unmeasured_enthalpy_against_trust_constr():
    x = X_MIX[:5]
    u = U_MIX[:5]

    def res(x, y):
        return mixer(np.concatenate([x, y]), None)

    r = reconcile_nonlinear(res, x, np.diag(u**2), y0=[150.0])
    assert r.observable.all() and r.dof == 1
    opt = scipy.optimize.minimize(
        lambda v: np.sum(((v[:5] - x) / u) ** 2),
        np.concatenate([x, [150.0]]),
        method="trust-constr",
        constraints=[scipy.optimize.NonlinearConstraint(lambda v: res(v[:5], v[5:]), 0, 0)],
        options={"xtol": 1e-12, "gtol": 1e-12, "maxiter": 5000},
    )
    # trust-constr meets its constraint to ~1e-10 and the optimality to gtol; values
    # of size 10-300 then agree to ~1e-6.
    np.testing.assert_allclose(r.x, opt.x[:5], atol=1e-5)
    assert r.y[0] == pytest.approx(opt.x[5], abs=1e-4)
    # The product form fixes h2 = (m0 h0 + m1 h1) / m2 at the solution.
    assert r.y[0] == pytest.approx((r.x[0] * r.x[3] + r.x[1] * r.x[4]) / (r.x[0] + r.x[1]))


@pytest.mark.parametrize("kind", ["dense", "sparse"])
def test_analytic_jacobian_gives_same_answer(kind):
    def jac(x, y):
        Jx, Jy = mixer_jac(x, y)
        return (sp.csr_matrix(Jx), sp.csr_matrix(Jy)) if kind == "sparse" else (Jx, Jy)

    S = np.diag(U_MIX**2)
    fd = reconcile_nonlinear(mixer, X_MIX, S)
    an = reconcile_nonlinear(mixer, X_MIX, sp.csr_matrix(S) if kind == "sparse" else S, None, jac)
    # Both converge to tol 1e-8 of the uncertainties; central differences have
    # relative error ~1e-10 in the Jacobian, which moves the covariance by as much.
    np.testing.assert_allclose(an.x, fd.x, atol=1e-7)
    np.testing.assert_allclose(an.u_reconciled, fd.u_reconciled, rtol=1e-6)
    np.testing.assert_allclose(an.z, fd.z, rtol=1e-6)


def test_linear_problem_reproduces_linear_result():
    rng = np.random.default_rng(2)
    A = rng.normal(size=(3, 7))
    B = rng.normal(size=(3, 1))
    x = rng.normal(size=7)
    S = np.diag(rng.uniform(0.5, 2, 7))
    lin = reconcile_linear(x, S, A, np.ones(3), B)
    non = reconcile_nonlinear(lambda x, y: A @ x + B @ y - 1.0, x, S, y0=[0.0])
    # A linear problem converges in one step (plus the confirming one); the
    # difference is finite-difference rounding (~1e-10 relative).
    np.testing.assert_allclose(non.x, lin.x, atol=1e-8)
    np.testing.assert_allclose(non.y, lin.y, atol=1e-8)
    np.testing.assert_allclose(non.x_cov, lin.x_cov, atol=1e-8)
    assert non.chi2 == pytest.approx(lin.chi2, rel=1e-8)
    assert non.iterations <= 3


def test_covariance_against_monte_carlo():
    # Small noise relative to curvature: linear propagation at the solution should
    # match the spread of the nonlinear estimates over repeated noisy measurements.
    rng = np.random.default_rng(7)
    truth = np.array([10.0, 5.0, 15.0, 100.0, 300.0, 0.0])
    truth[5] = (truth[0] * truth[3] + truth[1] * truth[4]) / truth[2]
    u = U_MIX * 0.2
    S = np.diag(u**2)
    ref = reconcile_nonlinear(mixer, truth, S, jacobian=mixer_jac)
    N = 150
    xs = np.array(
        [
            reconcile_nonlinear(mixer, truth + rng.normal(size=6) * u, S, jacobian=mixer_jac).x
            for _ in range(N)
        ]
    )
    sd = xs.std(axis=0, ddof=1)
    # The sample standard deviation from N = 150 has relative standard error
    # 1/sqrt(2N) ~ 5.8 %; allow 4 of them (23 %).  The reconciled uncertainties of
    # the flows are 30-60 % below the measured ones, so using the wrong covariance
    # (e.g. the measured one) fails.
    np.testing.assert_allclose(sd, ref.u_reconciled, rtol=4 / np.sqrt(2 * N))
    assert np.any(ref.u_reconciled < 0.75 * u)


def test_unobservable_unmeasured_stay_put():
    # y0 + y1 = x0 - x1 fixes only the sum; x0 = x2 is redundant.
    def res(x, y):
        return np.array([x[0] - x[1] - y[0] - y[1], x[0] - x[2], y[2] ** 2 - x[1]])

    r = reconcile_nonlinear(res, [10.0, 4.0, 10.4], np.eye(3) * 0.1, y0=[1.0, 2.0, 1.5])
    np.testing.assert_array_equal(r.observable, [False, False, True])
    assert np.isnan(r.y[:2]).all()
    assert r.y[2] == pytest.approx(2.0, rel=1e-8)
    assert r.x[0] == pytest.approx(10.2, abs=1e-8)


def test_convergence_error_carries_state():
    # x0^2 + 1 = 0 has no real solution.
    with pytest.raises(ConvergenceError) as info:
        reconcile_nonlinear(lambda x, y: np.array([x[0] ** 2 + 1.0]), [1.0], np.eye(1), max_iter=5)
    err = info.value
    assert err.iterations >= 1
    assert err.residual_norm >= 1.0
    assert isinstance(err.iterate, tuple) and err.iterate[0].shape == (1,)


def test_bad_residual_raises_input_error():
    with pytest.raises(InputError, match="'residual' .* finite"):
        reconcile_nonlinear(lambda x, y: np.array([np.nan]), [1.0], np.eye(1))
    with pytest.raises(InputError, match="'residual' .* callable"):
        reconcile_nonlinear(3.0, [1.0], np.eye(1))
    with pytest.raises(InputError, match=r"'jacobian \(Jx\)' .* shape"):
        reconcile_nonlinear(
            mixer, X_MIX, np.diag(U_MIX**2), jacobian=lambda x, y: (np.ones((2, 3)), None)
        )


# --------------------------------------------------------------------------- hard starts
def test_pair_unobservable_at_solution_but_not_at_start():
    """Only the product y0 y1 (= y0 y2) is fixed; y1 = y2 is a separate equation.

    At the start y1 != y2 makes Jy square and regular (determinant y0 (y2 - y1)), so
    the pair looks observable, but barely: the exact linearised step is ~300 times
    the trust region.  At the solution y1 = y2 and nothing separates y0 from y1.  The
    line search alone stopped with a ConvergenceError after 50 iterations.
    """

    def res(x, y):
        return np.array([x[0] - y[0] * y[1], x[1] - y[0] * y[2], y[1] - y[2]])

    r = reconcile_nonlinear(res, [10.0, 10.6], np.eye(2) * 0.09, y0=[2.0, 5.0, 5.001])
    assert r.converged and r.iterations <= 10
    # x0 = x1 at the solution, equal weights: both go to the mean, chi2 = 0.6^2 / (2 * 0.09)
    # (closed form; rounding only)
    np.testing.assert_allclose(r.x, [10.3, 10.3], rtol=1e-10)
    assert r.chi2 == pytest.approx(2.0, rel=1e-8)
    assert r.dof == 1
    assert not r.observable.any() and np.isnan(r.y).all()


def test_inconsistent_linearisation_at_start_is_restored():
    """y^2 = 1 linearised at y = 0 reads 0 = 1: the linear solve alone refused it
    (InputError about inconsistent constraints); a restoration step moves y off it."""

    def res(x, y):
        return np.array([y[0] ** 2 - 1.0, x[0] - y[0], x[1] - y[0]])

    r = reconcile_nonlinear(res, [1.02, 0.97], np.eye(2) * 0.05**2, y0=[0.0])
    assert r.converged and r.iterations <= 10
    # From y = 0 only the rows x - y give a direction, towards the (positive)
    # measured values, so the root reached is y = +1; then x = 1 and
    # chi2 = (0.02^2 + 0.03^2) / 0.05^2 (closed form; rounding only).
    np.testing.assert_allclose(r.x, [1.0, 1.0], rtol=1e-10)
    assert r.y[0] == pytest.approx(1.0, rel=1e-10)
    assert r.chi2 == pytest.approx(0.52, rel=1e-8)
    assert r.dof == 2


@pytest.mark.parametrize("y0", [[1e-6, 166.0], [1e-3, 1e4], [0.01, 1e3]])
def test_bilinear_far_start(y0):
    """Mixer with the outlet's flow and enthalpy both unmeasured, started far away.

    With the outlet flow near zero the energy balance m2 h2 asks for an enormous
    enthalpy step; the line search alone crept along it (34, 49 and 16 iterations
    for these starts, i.e. the second only just under the limit of 50).
    """
    x = np.array([10.3, 5.1, 100.0, 300.0, 15.0])
    u = np.array([0.2, 0.1, 2.0, 3.0, 0.3])

    def res(x, y):
        m0, m1, h0, h1, m3 = x
        m2, h2 = y
        return np.array([m0 + m1 - m2, m0 * h0 + m1 * h1 - m2 * h2, m2 - m3])

    r = reconcile_nonlinear(res, x, np.diag(u**2), y0=y0)
    ref = reconcile_nonlinear(res, x, np.diag(u**2), y0=[15.0, 170.0])  # good start
    assert r.converged and r.iterations <= 20
    assert ref.iterations <= 5
    # Same optimum: both stop within 1e-8 of the uncertainties
    np.testing.assert_allclose(r.x, ref.x, atol=1e-7)
    np.testing.assert_allclose(r.y, ref.y, rtol=1e-8)
    # The energy balance fixes h2 = (m0 h0 + m1 h1) / m2 at the solution.
    assert r.y[1] == pytest.approx((r.x[0] * r.x[2] + r.x[1] * r.x[3]) / r.y[0], rel=1e-9)


# --------------------------------------------------------------------------- decoupled
# A condenser hotwell in miniature: x = (m1, m2, h_in, Q, T, h_out) measured;
# y = (h, p, W) unmeasured.  Rows: mass m1 = m2; energy m2 (h_in - h) = Q; a
# compressed-liquid state h = cp (T - 273.15) + v (p - p_sat(T)), defined only above
# saturation (a ValueError below, as the property layer refuses a liquid state
# there); a pump-like row W = m2 (h_out - h).  The pressure enters the state row
# alone, through the small slope v = dh/dp: with p unmeasured it is free in that
# row, which then says nothing about the rest.  cp, v and the Magnus formula for
# p_sat are round textbook values for water near 40 degC (from memory); the test
# needs only their shape.
_CP, _V = 4180.0, 1.0e-3


def _p_sat(T):
    t = T - 273.15
    return 611.2 * np.exp(17.62 * t / (t + 243.12))


def _hotwell(x, y, *, domain=True):
    m1, m2, h_in, Q, T, h_out = x
    h, p, W = y
    if domain and not p > _p_sat(T):
        raise ValueError("liquid state below saturation")
    return np.array(
        [
            m1 - m2,
            (m2 * (h_in - h) - Q) / 1e6,
            (h - _CP * (T - 273.15) - _V * (p - _p_sat(T))) / 1e3,
            (W - m2 * (h_out - h)) / 1e6,
        ]
    )


# The energy balance puts h some 30 kJ/kg below the liquid at T: the row closes only
# at p = p_sat - 3e7 Pa, outside the domain.
X_HW = np.array([30.0, 30.6, 2.30e6, 6.58e7, 311.15, 1.68e5])
U_HW = np.array([0.3, 0.3, 2.0e4, 6.0e5, 0.15, 1.0e3])
Y0_HW = np.array([1.59e5, 1.0e4, 3.0e5])


def test_pressure_free_in_its_row_with_no_root_is_unobservable():
    """The iteration stalled at the saturation boundary: the exact step in p was
    ~3e7 Pa, against a trust region of ~5e4 Pa, and every step towards it left the
    liquid domain (ConvergenceError after 50 iterations, residual norm ~1e-14).
    Now the state row and p are set aside, the rest is reconciled, and p is
    reported not observable."""
    cov = np.diag(U_HW**2)
    r = reconcile_nonlinear(_hotwell, X_HW, cov, y0=Y0_HW)
    assert r.converged
    np.testing.assert_array_equal(r.observable, [True, False, True])
    assert np.isnan(r.y[1]) and np.isnan(r.y_u[1])
    assert np.isnan(r.y_cov[1]).all() and np.isnan(r.xy_cov[:, 1]).all()
    # The other rows close at the estimates (mass, energy, pump row), to rounding.
    h, W = r.y[0], r.y[2]
    closed = _hotwell(r.x, [h, 1e30, W], domain=False)[[0, 1, 3]]
    assert np.max(np.abs(closed)) < 1e-9
    assert r.residual_norm < 1e-9

    # Closed form (p free, so only m1 = m2 is redundant): m1 = m2 = their mean,
    # chi2 = (m1 - m2)^2 / (2 u^2) = 2, dof 1; h_in, Q, T, h_out not adjusted.
    m = X_HW[:2].mean()
    np.testing.assert_allclose(r.x, [m, m, *X_HW[2:]], rtol=1e-12)
    assert r.chi2 == pytest.approx(2.0, rel=1e-9)
    assert r.dof == 1
    assert h == pytest.approx(X_HW[2] - X_HW[3] / m, rel=1e-10)
    # The nodal test's one row is the mass balance (row 0 of the full problem); the
    # energy and pump rows determine h and W, the state row p.
    np.testing.assert_array_equal(nodal_test(r).constraint, [0])
    # The same with the state row first: the row left is still the mass balance, now
    # row 1 of the full problem (not row 0 of the problem without the state row).
    order = [2, 0, 1, 3]
    r2 = reconcile_nonlinear(lambda x, y: _hotwell(x, y)[order], X_HW, cov, y0=Y0_HW)
    np.testing.assert_array_equal(nodal_test(r2).constraint, [1])
    np.testing.assert_allclose(nodal_test(r2).statistic, nodal_test(r).statistic, rtol=1e-9)

    # Independent solution: SLSQP on the rows that remain once p is free (mass,
    # energy, pump) with the same weights and (h, W) unmeasured.  The full problem is
    # no fit for a reference solver: with p free the state row's multiplier is zero
    # at the optimum, a degenerate subproblem on which SLSQP's outcome depends on
    # rounding (it stopped with "Rank-deficient equality constraint subproblem" on
    # some machines and test orders).  The reduced problem is regular (constraint
    # Jacobian of full row rank 3, unique multipliers); it is given analytic
    # derivatives so that no finite-difference step enters.  Variables are scaled
    # to O(1): x = xm + u a, (h, W) = (h0, W0) + s b; SLSQP is not scale invariant.
    s = np.array([1e4, 1e5])
    y0 = Y0_HW[[0, 2]]

    def split(z):
        return X_HW + U_HW * z[:6], y0 + s * z[6:]

    def rows(z):
        (m1, m2, h_in, Q, _, h_out), (h, W) = split(z)
        return np.array([m1 - m2, (m2 * (h_in - h) - Q) / 1e6, (W - m2 * (h_out - h)) / 1e6])

    def rows_jac(z):
        (_, m2, h_in, _, _, h_out), (h, _) = split(z)
        J = np.zeros((3, 8))
        J[0, :2] = 1.0, -1.0
        J[1, [1, 2, 3, 6]] = (h_in - h) / 1e6, m2 / 1e6, -1.0 / 1e6, -m2 / 1e6
        J[2, [1, 5, 6, 7]] = -(h_out - h) / 1e6, -m2 / 1e6, m2 / 1e6, 1.0 / 1e6
        return J * np.concatenate([U_HW, s])

    def objective(z):
        return 0.5 * float(z[:6] @ z[:6])

    def gradient(z):
        return np.concatenate([z[:6], np.zeros(2)])

    opt = scipy.optimize.minimize(
        objective,
        np.zeros(8),
        jac=gradient,
        constraints=[{"type": "eq", "fun": rows, "jac": rows_jac}],
        method="SLSQP",
        options={"ftol": 1e-15, "maxiter": 1000},
    )
    assert opt.success, opt.message
    x_s, (h_s, W_s) = split(opt.x)
    # SLSQP stops when the objective (1.0 here) changes by less than ftol = 1e-15;
    # the objective is quadratic in the distance, so x is good to ~sqrt(1e-15) u,
    # ~3e-8 u; 1e-6 u leaves room for the constraint tolerance.
    assert np.max(np.abs(x_s - r.x) / U_HW) < 1e-6
    assert abs(h_s - h) < 1e-6 * r.y_u[0]
    assert abs(W_s - W) < 1e-6 * r.y_u[2]
    # ... and the state row, solved for p at that h (it is linear in p), puts p
    # below saturation: the row has no root in the domain.
    T = X_HW[4]
    p_root = _p_sat(T) + (h_s - _CP * (T - 273.15)) / _V
    assert p_root < _p_sat(T) - 1e7

    # Uncertainty of W = m2 (h_out - h) = m (h_out - h_in) + Q from its row, by
    # linear propagation in closed form: var(m) = u_m^2 / 2.
    var_W = (
        (X_HW[5] - X_HW[2]) ** 2 * U_HW[0] ** 2 / 2
        + m**2 * (U_HW[5] ** 2 + U_HW[2] ** 2)
        + U_HW[3] ** 2
    )
    # rounding only (the propagation is exact for this row, linear in h and W)
    assert r.y_u[2] == pytest.approx(np.sqrt(var_W), rel=1e-8)
    assert r.y_cov[2, 2] == pytest.approx(var_W, rel=1e-8)
    # Its covariances with the other estimates, by the same closed form: W and h are
    # linear in (m, h_in, Q, h_out) with gradients (h_out - h_in, -m, 1, m) and
    # (Q / m^2, 1, -1 / m, 0); cov(m1, m2) = var(m) since both are the mean.
    var_m = U_HW[0] ** 2 / 2
    h_in, Q, h_out = X_HW[2], X_HW[3], X_HW[5]
    cov_Wx = [(h_out - h_in) * var_m] * 2 + [-m * U_HW[2] ** 2, U_HW[3] ** 2, 0.0]
    cov_Wx += [m * U_HW[5] ** 2]
    cov_Wh = (h_out - h_in) * Q / m**2 * var_m - m * U_HW[2] ** 2 - U_HW[3] ** 2 / m
    # (the T entry is exactly 0; atol covers its rounding, ~1e-16 of var_W)
    np.testing.assert_allclose(r.xy_cov[:, 2], cov_Wx, rtol=1e-8, atol=1e-12 * var_W)
    assert r.y_cov[0, 2] == pytest.approx(cov_Wh, rel=1e-8)
    assert r.y_cov[2, 0] == r.y_cov[0, 2]


def test_final_solve_shortcut_changes_no_iterate(monkeypatch):
    """The closing solve may eliminate the unmeasured variables by a cheaper route
    (the triangular structure of J_y, or the RZ decomposition of R1), equal to
    rounding: the iterations are as many, and everything the closing solve gives
    (x, chi2, the nodal rows, y) equals the exact route's to well within the
    convergence tolerance (1e-8 of the uncertainties; a step taken from the closing
    solve differs from the exact route's by rounding).  Mixer with a pair (m4, h4)
    whose product alone enters a balance: J_y is rank-deficient.  Reference: the
    same engine with the shortcut switched off."""
    from perftest.balance import _dense

    def res(x, y):
        m0, m1, h0, h1, h2, m3, h3 = x
        m2, m4, h4 = y
        return np.array([m0 + m1 - m2, m0 * h0 + m1 * h1 - m2 * h2, m4 * h4 - m3 * h3])

    x = np.array([10.3, 5.1, 100.0, 300.0, 168.0, 2.0, 50.0])
    u = np.array([0.2, 0.1, 2.0, 3.0, 2.0, 0.05, 1.0])
    cov = np.diag(u**2)
    y0 = [15.0, 1.0, 90.0]
    seen = []
    reduce = _dense.reduce_constraints

    def spy(Bt, At, bt, *, final=False, pattern=None):
        red = reduce(Bt, At, bt, final=final, pattern=pattern)
        seen.append(red.exact)
        return red

    monkeypatch.setattr(_dense, "reduce_constraints", spy)
    fast = reconcile_nonlinear(res, x, cov, y0=y0)
    assert False in seen  # the shortcut was taken

    def exact(Bt, At, bt, *, final=False, pattern=None):
        return reduce(Bt, At, bt)

    monkeypatch.setattr(_dense, "reduce_constraints", exact)
    ref = reconcile_nonlinear(res, x, cov, y0=y0)
    assert fast.iterations == ref.iterations and fast.dof == ref.dof == 1
    np.testing.assert_allclose(fast.x, ref.x, rtol=0, atol=1e-9 * u.min())
    assert fast.chi2 == pytest.approx(ref.chi2, rel=1e-9)
    np.testing.assert_array_equal(fast.constraint_rows, ref.constraint_rows)
    np.testing.assert_allclose(
        fast.constraint_residual, ref.constraint_residual, rtol=1e-9, atol=1e-9
    )
    np.testing.assert_array_equal(fast.observable, [True, False, False])
    np.testing.assert_allclose(fast.y[0], ref.y[0], rtol=1e-9)
    np.testing.assert_allclose(fast.y_cov[0, 0], ref.y_cov[0, 0], rtol=1e-9)


def _network(n_nodes, seed):
    """A generated heat network: a random tree of mixing nodes, per node a mass and an
    energy balance (bilinear m h terms); every third product's enthalpy unmeasured,
    and the feed's flow.  Invented numbers.  Returns (residual, jacobian, x, u, y0)."""
    rng = np.random.default_rng(seed)
    parent = np.concatenate([[-1], [rng.integers(0, i) for i in range(1, n_nodes)]])
    ns = 2 * n_nodes  # streams: inflow of node i (i < n), product of node i - n
    N = np.zeros((n_nodes, ns))
    for i in range(n_nodes):
        N[i, i] = 1.0  # its inflow enters
        if parent[i] >= 0:
            N[parent[i], i] = -1.0  # and leaves its parent
        N[i, n_nodes + i] = -1.0  # its product leaves
    prod = rng.uniform(1.0, 5.0, n_nodes)
    m = np.concatenate([np.zeros(n_nodes), prod])
    for i in range(n_nodes - 1, -1, -1):
        m[i] += prod[i] + sum(m[j] for j in range(n_nodes) if parent[j] == i)
    h_node = np.zeros(n_nodes)
    for i in range(n_nodes):
        h_node[i] = (4.0e5 if parent[i] < 0 else h_node[parent[i]]) + rng.uniform(-5e4, 5e4)
    h = np.concatenate([[4.0e5 if parent[i] < 0 else h_node[parent[i]] for i in range(n_nodes)],
                        h_node])  # fmt: skip
    Q = -(N @ (m * h))
    truth = np.concatenate([m, h])
    unmeasured = np.concatenate([[0], ns + n_nodes + np.arange(0, n_nodes, 3)])
    measured = np.setdiff1d(np.arange(2 * ns), unmeasured)
    u = np.where(measured < ns, 0.01 * truth[measured] + 0.01, 2e3)
    x = truth[measured] + rng.normal(size=measured.size) * u
    y0 = truth[unmeasured] * 1.05

    def full(x, y):
        v = np.empty(2 * ns)
        v[measured], v[unmeasured] = x, y
        return v[:ns], v[ns:]

    def residual(x, y):
        mm, hh = full(x, y)
        return np.concatenate([N @ mm, (N @ (mm * hh) + Q) / 1e5])

    def jacobian(x, y):
        mm, hh = full(x, y)
        J = np.block([[N, np.zeros_like(N)], [N * hh / 1e5, N * mm / 1e5]])
        return J[:, measured], J[:, unmeasured]

    return residual, jacobian, x, u, y0


@pytest.mark.parametrize("n_nodes, seed", [(12, 1), (70, 2), (70, 3)])
def test_steps_from_a_kept_factor_change_no_result(n_nodes, seed, monkeypatch, refine_calls):
    """Steps solved by refinement with the factor of an earlier iterate (``_kkt.Reuse``)
    lead to the solution of fresh factorisations in as many iterations: the estimates,
    statistics and covariances agree to 1e-9 of the uncertainties."""
    from perftest.balance import _kkt

    residual, jacobian, x, u, y0 = _network(n_nodes, seed)
    cov = np.diag(u**2)
    fast = reconcile_nonlinear(residual, x, cov, y0=y0, jacobian=jacobian)
    assert any(refine_calls)  # steps were taken from a kept factor
    monkeypatch.setattr(_kkt.Reuse, "refine", lambda self, *args: None)
    ref = reconcile_nonlinear(residual, x, cov, y0=y0, jacobian=jacobian)
    assert fast.iterations == ref.iterations
    assert np.all(np.abs(fast.x - ref.x) <= 1e-9 * u)
    np.testing.assert_array_equal(fast.observable, ref.observable)
    obs = ref.observable
    assert obs.sum() >= 2 and np.all(np.abs(fast.y - ref.y)[obs] <= 1e-9 * ref.y_u[obs])
    assert fast.chi2 == pytest.approx(ref.chi2, rel=1e-9, abs=1e-9)
    np.testing.assert_allclose(fast.u_reconciled, ref.u_reconciled, rtol=1e-9)
    np.testing.assert_allclose(fast.y_u[obs], ref.y_u[obs], rtol=1e-9)
    np.testing.assert_allclose(fast.z, ref.z, rtol=0, atol=1e-9)
