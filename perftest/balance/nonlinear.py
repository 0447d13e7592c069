"""Nonlinear data reconciliation by successive linearisation."""

from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp

from perftest.balance import _checks
from perftest.balance.linear import (
    Problem,
    build_result,
    raise_if_inconsistent,
    solve,
)
from perftest.errors import ConvergenceError, InputError, ReconciliationWarning

__all__ = ["reconcile_nonlinear", "finite_difference_jacobian"]

_EPS = np.finfo(float).eps
# Central differences: the step eps**(1/3) * scale balances truncation
# (~h^2) against rounding (~eps/h) errors.
_FD_REL = _EPS ** (1.0 / 3.0)
# Armijo sufficient-decrease constant and smallest step of the line search.
_ARMIJO = 1e-4
_MIN_STEP = 1.0 / 1024.0


def finite_difference_jacobian(residual, x, y, x_scale, y_scale):
    """Central-difference Jacobians ``(Jx, Jy)`` of ``residual(x, y)``.

    Parameters
    ----------
    residual : callable
        ``residual(x, y) -> ndarray (m,)``.
    x, y : ndarray
        Point of evaluation.
    x_scale, y_scale : ndarray
        Typical sizes of the variables (positive); each step is
        ``eps**(1/3) * max(|v|, scale)``.

    Returns
    -------
    tuple of ndarray
        ``Jx`` (m, n) and ``Jy`` (m, k).
    """

    def columns(v, scale, call):
        cols = []
        for j in range(v.size):
            h = _FD_REL * max(abs(v[j]), scale[j])
            vp = v.copy()
            vm = v.copy()
            vp[j] += h
            vm[j] -= h
            # Use the representable step so the quotient is exact in its denominator.
            cols.append((call(vp) - call(vm)) / (vp[j] - vm[j]))
        return cols

    fx = columns(x, x_scale, lambda v: np.asarray(residual(v, y), dtype=float))
    fy = columns(y, y_scale, lambda v: np.asarray(residual(x, v), dtype=float))
    m = np.asarray(residual(x, y)).size
    Jx = np.column_stack(fx) if fx else np.zeros((m, 0))
    Jy = np.column_stack(fy) if fy else np.zeros((m, 0))
    return Jx, Jy


def _evaluate(residual, x, y, m=None):
    try:
        f = np.asarray(residual(x, y), dtype=float)
    except (ArithmeticError, ValueError):
        # A trial point outside the model's domain (e.g. a property call out of
        # range) counts as an infinitely bad point for the line search.
        return None
    if f.ndim != 1 or (m is not None and f.size != m) or not np.all(np.isfinite(f)):
        return None
    return f


def reconcile_nonlinear(
    residual,
    x,
    cov,
    y0=None,
    jacobian=None,
    *,
    tol: float = 1e-8,
    max_iter: int = 50,
    y_scale=None,
):
    """Reconcile measurements with nonlinear constraints by successive linearisation.

    Parameters
    ----------
    residual : callable
        ``residual(x, y) -> ndarray (m,)``; zero when the balances close.  ``x`` are
        the measured variables (n,), ``y`` the unmeasured ones (k,).
    x : array_like (n,)
        Measured values.
    cov : array_like (n, n) or scipy.sparse matrix
        Covariance of the measurement errors.
    y0 : array_like (k,), optional
        Starting values of the unmeasured variables; none by default.
    jacobian : callable, optional
        ``jacobian(x, y) -> (Jx, Jy)`` with shapes (m, n) and (m, k), dense or
        scipy.sparse.  Central finite differences are used when omitted.
    tol : float
        Convergence tolerance: the last step must be below ``tol`` times the
        standard uncertainty of each measured variable (and ``tol`` times the size
        of each unmeasured one), and every residual below ``tol`` times its
        standard deviation under measurement noise.
    max_iter : int
        Largest number of linearisations.
    y_scale : array_like (k,), optional
        Typical size of each unmeasured variable, used for finite-difference steps
        and the step test; default ``max(|y0|, 1)``.

    Returns
    -------
    Reconciliation
        As for :func:`reconcile_linear`, with covariance, tests, redundancy and
        observability taken from the linearisation at the solution;
        ``method == "nonlinear"``.

    Raises
    ------
    InputError
        Bad shapes, non-finite inputs, a residual that is not finite at the start.
    ConvergenceError
        No convergence within ``max_iter`` iterations; carries the last residual
        norm, iterate ``(x, y)`` and the iteration count.

    Notes
    -----
    Iteration :math:`k` solves the linearised problem with the linear machinery

    .. math::

        \\min_{x, y} (x - x_m)^T S^{-1} (x - x_m) \\quad \\text{s.t.} \\quad
        f(x_k, y_k) + J_x (x - x_k) + J_y (y - y_k) = 0,

    taking the minimum-norm step in :math:`y` so that unobservable unmeasured
    variables stay where they are.  The step is shortened by backtracking until
    the exact penalty merit function

    .. math::

        \\phi(x, y) = \\tfrac12 (x - x_m)^T S^{-1} (x - x_m) + \\mu \\| W f(x, y) \\|_1

    decreases sufficiently (Armijo), with :math:`W` scaling each residual by its
    standard deviation at the start and :math:`\\mu` above the largest scaled
    multiplier [1]_.  The chi-square statistic is the objective at the solution
    and its degrees of freedom the rank of the projected Jacobian [2]_.

    References
    ----------
    .. [1] J. Nocedal, S. J. Wright, "Numerical Optimization", 2nd ed., Springer,
       2006, Sec. 15.4 and 18.3. DOI 10.1007/978-0-387-40065-5
    .. [2] S. Narasimhan, C. Jordache, "Data Reconciliation and Gross Error
       Detection", Gulf Publishing, 2000, Ch. 5. DOI 10.1016/B978-088415255-2/50000-4
    """
    func = "reconcile_nonlinear"
    if not callable(residual):
        raise InputError(
            f"The 'residual' parameter of {func} must be a callable residual(x, y). "
            f"Got {type(residual).__name__}.",
            parameter="residual",
        )
    if jacobian is not None and not callable(jacobian):
        raise InputError(
            f"The 'jacobian' parameter of {func} must be a callable jacobian(x, y) "
            f"returning (Jx, Jy), or None. Got {type(jacobian).__name__}.",
            parameter="jacobian",
        )
    xm = _checks.vector(x, "x", func)
    n = xm.size
    y = np.zeros(0) if y0 is None else _checks.vector(y0, "y0", func)
    k = y.size
    S, sdiag, is_diag, chol = _checks.covariance(cov, n, func)
    if y_scale is None:
        y_scale = np.maximum(np.abs(y), 1.0)
    else:
        y_scale = _checks.vector(y_scale, "y_scale", func, length=k)
        if np.any(y_scale <= 0):
            raise InputError(
                f"The 'y_scale' parameter of {func} must be positive. Got {y_scale}.",
                parameter="y_scale",
            )
    u = np.sqrt(sdiag)
    try:
        f = np.asarray(residual(xm.copy(), y.copy()), dtype=float)
    except InputError:
        raise
    if f.ndim != 1:
        raise InputError(
            f"The 'residual' parameter of {func} must return a 1-D array. "
            f"Got shape {f.shape} at the measured values.",
            parameter="residual",
        )
    _checks.finite(f, "residual", func)
    m = f.size

    def jac(xk, yk):
        if jacobian is None:
            return finite_difference_jacobian(residual, xk, yk, u, y_scale)
        out = jacobian(xk.copy(), yk.copy())
        if not isinstance(out, tuple | list) or len(out) != 2:
            raise InputError(
                f"The 'jacobian' parameter of {func} must return a pair (Jx, Jy). "
                f"Got {type(out).__name__}.",
                parameter="jacobian",
            )
        Jx, Jy = out
        Jx = _checks.matrix(Jx, "jacobian (Jx)", func, rows=m, cols=n)
        if Jy is None:
            Jy = np.zeros((m, 0))
        Jy = _checks.matrix(Jy, "jacobian (Jy)", func, rows=m, cols=k)
        return Jx, Jy

    if is_diag:
        sinv = 1.0 / sdiag

        def objective(xk):
            d = xk - xm
            return 0.5 * float(d @ (sinv * d))
    else:
        if sp.issparse(S):
            import scipy.sparse.linalg as spla

            S_lu = spla.splu(sp.csc_matrix(S))

            def objective(xk):
                d = xk - xm
                return 0.5 * float(d @ S_lu.solve(d))
        else:
            import scipy.linalg

            def objective(xk):
                d = scipy.linalg.solve_triangular(chol, xk - xm, lower=True, check_finite=False)
                return 0.5 * float(d @ d)

    xk = xm.copy()
    fk = f
    mu = 0.0
    row_scale = None
    p = core = None
    converged = False
    it = 0
    while it < max_iter:
        it += 1
        Jx, Jy = jac(xk, y)
        # Linearised constraints in the variables (x, dy): Jx x + Jy dy = Jx xk - f.
        b_lin = Jx @ xk - fk
        p = _linearised_problem(xm, S, sdiag, is_diag, Jx, b_lin, Jy)
        core = solve(p)
        raise_if_inconsistent(core, func)
        if row_scale is None:
            # Standard deviation of each residual under measurement noise, from the
            # first linearisation; fixed afterwards so the merit function is fixed.
            sd = _row_sd(Jx, S, sdiag, is_diag)
            pos = sd[sd > 0]
            floor = pos.min() if pos.size else 1.0
            row_scale = 1.0 / np.where(sd > 0, sd, floor)
        dx = core.xhat - xk
        dy = core.y  # minimum-norm step in y
        step_small = np.all(np.abs(dx) <= tol * u) and np.all(
            np.abs(dy) <= tol * np.maximum(np.abs(y), y_scale)
        )
        resid_small = np.all(np.abs(fk) * row_scale <= tol)
        if step_small and resid_small:
            converged = True
            break
        # Exact-penalty parameter above the largest scaled multiplier.
        lam_scaled = np.abs(core.lam) / row_scale
        mu = max(mu, 1.5 * float(lam_scaled.max(initial=0.0)) + 1.0)
        phi0 = objective(xk) + mu * float(np.sum(np.abs(fk) * row_scale))
        # Directional derivative of the merit along the step (constraints linearised).
        grad_obj = _obj_grad(xk, xm, S, sdiag, is_diag, chol)
        dphi = float(grad_obj @ dx) - mu * float(np.sum(np.abs(fk) * row_scale))
        alpha = 1.0
        accepted = False
        while alpha >= _MIN_STEP:
            xt = xk + alpha * dx
            yt = y + alpha * dy
            ft = _evaluate(residual, xt.copy(), yt.copy(), m)
            if ft is not None:
                phi = objective(xt) + mu * float(np.sum(np.abs(ft) * row_scale))
                if phi <= phi0 + _ARMIJO * alpha * min(dphi, 0.0):
                    accepted = True
                    break
            alpha *= 0.5
        if not accepted:
            # No sufficient decrease: take the shortest evaluated step that the
            # model accepts, so a stalled iteration still moves and the count runs out.
            if ft is None:
                break
        xk, y, fk = xt, yt, ft
    if not converged:
        norm = float(np.linalg.norm(fk))
        raise ConvergenceError(
            f"reconcile_nonlinear did not converge in {it} iterations (max_iter = "
            f"{max_iter}); the constraint residual norm is {norm:.3g}. Check the model "
            f"and the starting values 'y0', or raise 'max_iter'.",
            residual_norm=norm,
            iterate=(xk.copy(), y.copy()),
            iterations=it,
            parameter="residual",
        )
    # Statistics from the final linearisation (at the solution).  The step of the
    # last solve is below tolerance, so its x, y are the solution.
    core.y = y + core.y
    if core.dof == 0:
        warnings.warn(
            "The constraints leave no redundancy: nothing can be reconciled "
            "(dof = 0, chi2 = 0, p_value = 1). Add measurements or balances.",
            ReconciliationWarning,
            stacklevel=2,
        )
    f_final = _evaluate(residual, core.xhat.copy(), core.y.copy(), m)
    norm = float(np.linalg.norm(fk if f_final is None else f_final))
    return build_result(
        p, core, method="nonlinear", converged=True, iterations=it, residual_norm=norm
    )


def _linearised_problem(xm, S, sdiag, is_diag, Jx, b_lin, Jy):
    # The covariance was checked once on entry; the Jacobians by jac().
    sparse = sp.issparse(Jx) or sp.issparse(Jy) or sp.issparse(S)
    if sparse:
        return Problem(
            xm, sp.csr_matrix(S), sdiag, is_diag, sp.csr_matrix(Jx), b_lin, sp.csr_matrix(Jy), True
        )
    return Problem(xm, S, sdiag, is_diag, Jx, b_lin, Jy, False)


def _row_sd(Jx, S, sdiag, is_diag):
    if sp.issparse(Jx):
        Jx = sp.csr_matrix(Jx)
        if is_diag:
            return np.sqrt(np.asarray(Jx.multiply(Jx) @ sdiag).ravel())
        return np.sqrt(np.asarray((Jx @ S).multiply(Jx).sum(axis=1)).ravel())
    if is_diag:
        return np.sqrt((Jx * Jx) @ sdiag)
    return np.sqrt(np.einsum("ij,ij->i", Jx @ S, Jx))


def _obj_grad(xk, xm, S, sdiag, is_diag, chol):
    d = xk - xm
    if is_diag:
        return d / sdiag
    if sp.issparse(S):
        import scipy.sparse.linalg as spla

        return spla.spsolve(sp.csc_matrix(S), d)
    import scipy.linalg

    return scipy.linalg.cho_solve((chol, True), d, check_finite=False)
