"""Nonlinear reconciliation checked against scipy.optimize and the linear closed form."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.optimize
import scipy.sparse as sp

from perftest.balance import reconcile_linear, reconcile_nonlinear
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
