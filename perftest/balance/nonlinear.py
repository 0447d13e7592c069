"""Nonlinear data reconciliation by successive linearisation."""

from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp

from perftest.balance import _checks
from perftest.balance._core import Problem
from perftest.balance._fd import finite_difference_jacobian
from perftest.balance._kkt import Reuse, kkt_step
from perftest.balance._threads import one_blas_thread_when_small
from perftest.balance.linear import build_result, solve
from perftest.errors import ConvergenceError, InputError, ReconciliationWarning

__all__ = ["reconcile_nonlinear", "finite_difference_jacobian"]

# Armijo sufficient-decrease constant and smallest step of the line search.
_ARMIJO = 1e-4
_MIN_STEP = 1.0 / 1024.0
# Trust region, in scaled variables and times the radius (which starts at 1 and
# adapts: doubled after a full step that used it, quartered after a failure).  A
# measured x moves by at most _X_BOX standard uncertainties per step ("a few": a
# larger move means the linearisation is being trusted far from where it was
# taken); an unmeasured y by _Y_BOX of |y| + y_scale (a factor-of-1.5 change of a
# flow or an enthalpy in one step is already a strong nonlinearity for m h).
_X_BOX = 3.0
_Y_BOX = 0.5
# In the Levenberg-Marquardt (restoration) steps a measured x is this many times
# stiffer than in the trust region: the measured values are right to a few standard
# uncertainties while the starting values of y are guesses, so the guesses should
# take up most of a large constraint violation.
_X_RESTORE = 0.1
_RADIUS_MIN = 1e-6
_RADIUS_MAX = 1e6
# An exact step outside the trust region is still taken when the merit falls by at
# least this share of the decrease the linearisation predicts (the linearisation is
# then good over the whole step; e.g. a linear problem, or a large but consistent
# adjustment of a measurement with a gross error).
_GOOD_RATIO = 0.5
# Steps below this many standard uncertainties (x) or this fraction of |y| + y_scale
# are inside the region of quadratic convergence; they are taken whole, because
# there the merit function changes by rounding only and cannot judge them.
_LOCAL = 1e-4
# Shrinks of the trust region tried within one iteration before giving up.
_MAX_SHRINK = 8


def _evaluate(residual, x, y, m=None):
    try:
        f = np.asarray(residual(x, y), dtype=float)
    except (ArithmeticError, ValueError):
        # A trial point outside the model's domain (e.g. a property call out of
        # range) counts as an infinitely bad point for the line search.
        return None
    if f.ndim != 1 or (m is not None and f.size != m) or not np.isfinite(f).all():
        return None
    return f


def _nonlinear_size(residual=None, x=None, cov=None, y0=None, *args, **kwargs):
    return np.size(x) + (0 if y0 is None else np.size(y0))


@one_blas_thread_when_small(_nonlinear_size)
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
    variables stay where they are.  Steps are judged by the exact penalty merit
    function

    .. math::

        \\phi(x, y) = \\tfrac12 (x - x_m)^T S^{-1} (x - x_m) + \\mu \\| W f(x, y) \\|_1

    with :math:`W` scaling each residual by its standard deviation at the start and
    :math:`\\mu` above the largest scaled multiplier [1]_ (Armijo sufficient decrease).
    A trust region in scaled variables (a few standard uncertainties for ``x``, a
    fraction of :math:`|y| + y_{scale}` for ``y``; the radius adapts) decides how
    far the linearisation is trusted.  The exact step is taken, with backtracking,
    when it lies inside the region, or whole when the merit falls by at least half
    of the predicted decrease.  Otherwise, in this order: (1) a Levenberg-regularised
    step with a prior of the trust-region size on the ``y`` step, so that a nearly
    rank-deficient :math:`J_y` (a pair such as flow and enthalpy that is barely
    observable at the iterate) gets no huge step; (2) Levenberg-Marquardt steps on
    :math:`\\|W f\\|^2` alone with stiff measured values (restoration; also used when
    the linearised constraints contradict each other); (3) the exact step cut to the
    trust region, with backtracking.  If none lowers the merit function the
    iteration has stalled.  A stalled (or ``max_iter``-long) iteration is retried
    once without the unmeasured variables that enter a single row each (Jacobian
    pattern at the start and at the last iterate): such a variable is free in its
    row, so the row constrains nothing else, and setting both aside changes no
    other estimate, nor ``chi2`` or ``dof``.  This is the case of a liquid's
    pressure known only through the small :math:`(\\partial h/\\partial p)_T`, whose
    exact step is many times its size and whose estimate may lie outside the
    model's domain (below saturation), where the iteration stalls.  The reduced
    problem starts again from ``y0`` with its own ``max_iter``; each variable set
    aside is then solved from its own row (Newton, halving), with its covariance
    propagated through that row, and is reported not observable (``nan``) when
    the row has no root inside the model's domain.  If the reduced problem does
    not converge either, a :class:`ConvergenceError` is raised.  Every Jacobian
    evaluation counts as one iteration.  The chi-square statistic is the
    objective at the solution and its degrees of freedom the rank of the projected
    Jacobian [2]_.

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
    if isinstance(max_iter, bool) or not isinstance(max_iter, int | np.integer) or max_iter < 1:
        raise InputError(
            f"The 'max_iter' parameter of {func} must be a whole number of at least 1. "
            f"Got {max_iter!r}.",
            parameter="max_iter",
        )
    if (
        isinstance(tol, bool)
        or not isinstance(tol, int | float | np.floating)
        or not (0.0 < float(tol) < 1.0)
    ):
        raise InputError(
            f"The 'tol' parameter of {func} must be a number between 0 and 1 (relative "
            f"tolerance, e.g. 1e-8). Got {tol!r}.",
            parameter="tol",
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
            from scipy.linalg.lapack import dtrtrs

            def objective(xk):
                # LAPACK directly: the routine scipy.linalg.solve_triangular calls
                d = dtrtrs(chol, xk - xm, lower=1)[0]
                return 0.5 * float(d @ d)

    xk = xm.copy()
    y_start = y.copy()
    fk = f
    mu = 0.0
    row_scale = None
    p = core = None
    converged = False
    radius = 1.0
    regular_before = True  # whether the last KKT system had every y determined
    # the last KKT factor, for the steps after it; their accuracy a tenth of the
    # convergence tolerance where it matters (see _kkt.Reuse)
    reuse = Reuse(0.1 * tol)
    last_step = np.inf  # largest scaled component of the last step taken
    it = 0
    while it < max_iter:
        it += 1
        # (the last iterate's Jacobians and problem let go first: the new ones take
        # their memory instead of fresh pages)
        Jx = Jy = p = core = None
        Jx, Jy = jac(xk, y)
        if row_scale is None:
            # Standard deviation of each residual under measurement noise, from the
            # first linearisation; fixed afterwards so the merit function is fixed.
            sd = _row_sd(Jx, S, sdiag, is_diag)
            pos = sd[sd > 0]
            floor = pos.min() if pos.size else 1.0
            sd = np.where(sd > 0, sd, floor)
            row_scale = 1.0 / sd
            reuse.row_scale = row_scale
        ysize = np.abs(y) + y_scale
        resid_small = bool((np.abs(fk) * row_scale <= tol).all())
        # Linearised constraints in the variables (x, dy): Jx x + Jy dy = Jx xk - f.
        b_lin = Jx @ xk - fk
        # The step from one factorisation of the KKT system where it is regular;
        # the full linear machinery (rank decisions, minimum-norm y) otherwise, and
        # wherever the iteration's choices need what only it gives: whether every y
        # is determined when the step leaves the trust region and the factorisation
        # could not tell (a regularised one), the statistics at the solution.
        # Residuals below tolerance after a step inside the region of quadratic
        # convergence: this is most likely the last linearisation, whose full solve
        # gives the statistics; go there directly.
        last_one = resid_small and last_step <= _LOCAL
        if last_one:
            reuse.factor = None  # not wanted by the full solve: its memory serves it
        step = (
            None
            if last_one
            else kkt_step(Jx, Jy, S, sdiag, is_diag, xk, xm, fk, ysize, regular_before, reuse)
        )
        p = core = None
        if step is not None:
            dx, dy, lam, all_observable = step
            regular_before = all_observable
            consistent = True
            size = max(
                (np.abs(dx) / u).max(initial=0.0) / _X_BOX,
                (np.abs(dy) / ysize).max(initial=0.0) / _Y_BOX,
            )
        if step is None or (size > radius and not all_observable):
            p = _linearised_problem(xm, S, sdiag, is_diag, Jx, b_lin, Jy)
            # At the predicted last linearisation the solve for a final result (see
            # linear.solve_dense: the same step, to rounding, if it is not the last).
            core = solve(p, deferred=True, final=last_one)
            consistent = core.inconsistent is None
            if consistent:
                dx, dy, lam = core.xhat - xk, core.y, core.lam  # minimum-norm step in y
            all_observable = bool(core.observable.all())
        viol = float(np.sum(np.abs(fk) * row_scale))
        grad_obj = _obj_grad(xk, xm, S, sdiag, is_diag, chol)
        accepted = False
        if consistent:
            sx = np.abs(dx) / u
            sy = np.abs(dy) / ysize
            if resid_small and (sx <= tol).all() and (sy <= tol).all():
                if core is None:
                    p = _linearised_problem(xm, S, sdiag, is_diag, Jx, b_lin, Jy)
                    core = solve(p, deferred=True, final=True)
                converged = True
                break
            # Exact-penalty parameter above the largest scaled multiplier.
            mu = max(mu, 1.5 * float((np.abs(lam) / row_scale).max(initial=0.0)) + 1.0)
            phi0 = objective(xk) + mu * viol
            # Directional derivative of the merit along the step (constraints linearised).
            dphi = float(grad_obj @ dx) - mu * viol
            size = max(sx.max(initial=0.0) / _X_BOX, sy.max(initial=0.0) / _Y_BOX)
            if (sx <= _LOCAL).all() and (sy <= _LOCAL).all():
                # Inside the region where Newton's method converges quadratically and
                # the merit changes by rounding only: take the full step.
                xt, yt = xk + dx, y + dy
                ft = _evaluate(residual, xt.copy(), yt.copy(), m)
                accepted = ft is not None
            else:
                if size <= radius:
                    alphas = _halvings()
                elif not all_observable:
                    # Some y are not determined at this iterate: their minimum-norm
                    # step is arbitrary, so a long step is not to be trusted.
                    alphas = ()
                else:
                    # Outside the trust region: the full step only, and only if the
                    # merit falls by a good share of what the linearisation predicts.
                    alphas = (1.0,)
                for alpha in alphas:
                    xt, yt = xk + alpha * dx, y + alpha * dy
                    ft = _evaluate(residual, xt.copy(), yt.copy(), m)
                    if ft is None:
                        continue
                    phi = objective(xt) + mu * float(np.sum(np.abs(ft) * row_scale))
                    c = _ARMIJO if size <= radius else _GOOD_RATIO
                    if phi <= phi0 + c * alpha * min(dphi, 0.0):
                        accepted = True
                        if alpha == 1.0:
                            radius = min(max(radius, 2.0 * size), _RADIUS_MAX)
                        break
        if not accepted and consistent and k:
            # Levenberg regularisation of the unmeasured block: a prior on the y step
            # (standard deviation of the trust-region size), constraints kept.
            dx, dy, lam = _damped_step(
                Jx, Jy, S, sdiag, is_diag, xk, xm, fk, radius * _Y_BOX * ysize
            )
            dsize = max(
                (np.abs(dx) / u).max(initial=0.0) / _X_BOX,
                (np.abs(dy) / ysize).max(initial=0.0) / _Y_BOX,
            )
            if dsize > radius:
                dx, dy = dx * (radius / dsize), dy * (radius / dsize)
            lin = float(np.sum(np.abs(fk + Jx @ dx + Jy @ dy) * row_scale))
            dmu = max(mu, 1.5 * float((np.abs(lam) / row_scale).max(initial=0.0)) + 1.0)
            dphi0 = objective(xk) + dmu * viol
            ddphi = float(grad_obj @ dx) + dmu * (lin - viol)
            # Only nearly full steps: a step cut further means the linearisation is
            # poor over the trust region, and the measured values would be pushed
            # to absorb what the guesses of y should; restoration is better then.
            for alpha in (1.0, 0.5, 0.25):
                xt, yt = xk + alpha * dx, y + alpha * dy
                ft = _evaluate(residual, xt.copy(), yt.copy(), m)
                if ft is None:
                    continue
                phi = objective(xt) + dmu * float(np.sum(np.abs(ft) * row_scale))
                if phi < dphi0 + _ARMIJO * alpha * min(ddphi, 0.0):
                    accepted = True
                    mu = dmu
                    if alpha == 1.0 and dsize >= radius:
                        radius = min(2.0 * radius, _RADIUS_MAX)
                    break
        if not (accepted or (consistent and resid_small)):
            accepted, radius, xt, yt, ft = _restoration(
                residual, m, objective, xk, y, fk, Jx, Jy, grad_obj, row_scale,
                u * _X_RESTORE, ysize * _Y_BOX, radius, mu, merit=consistent,
            )  # fmt: skip
        if not accepted and consistent:
            # Last resort: the exact step cut to the trust region, with backtracking
            # (a descent direction of the merit function, mu being above the multipliers).
            shrink = min(1.0, radius / size) if size > 0 else 1.0
            for alpha in _halvings():
                a = alpha * shrink
                xt, yt = xk + a * dx, y + a * dy
                ft = _evaluate(residual, xt.copy(), yt.copy(), m)
                if ft is None:
                    continue
                phi = objective(xt) + mu * float(np.sum(np.abs(ft) * row_scale))
                if phi < phi0 + _ARMIJO * a * min(dphi, 0.0):
                    accepted = True
                    break
            radius = max(radius / 4.0, _RADIUS_MIN)
        if not accepted:
            break  # no decrease in any direction tried: stalled
        last_step = max(
            (np.abs(xt - xk) / u).max(initial=0.0), (np.abs(yt - y) / ysize).max(initial=0.0)
        )
        xk, y, fk = xt, yt, ft
    if not converged:
        norm = float(np.linalg.norm(fk))
        error = ConvergenceError(
            f"reconcile_nonlinear did not converge in {it} iterations (max_iter = "
            f"{max_iter}); the constraint residual norm is {norm:.3g}. Check the model "
            f"and the starting values 'y0', or raise 'max_iter'.",
            residual_norm=norm,
            iterate=(xk.copy(), y.copy()),
            iterations=it,
            parameter="residual",
        )
        if k and row_scale is not None and not isinstance(residual, _Reduced):
            out = _solve_decoupled(
                residual, jac, xm, cov, y_start, xk, y, m, row_scale, y_scale, tol, max_iter, it
            )
            if out is not None:
                return out
        raise error
    # Statistics from the final linearisation (at the solution).  The step of the
    # last solve is below tolerance, so its x, y are the solution.
    core.y = y + core.y
    if core.dof == 0:
        warnings.warn(
            "The constraints leave no redundancy: nothing can be reconciled "
            "(dof = 0, chi2 = 0, p_value = 1). Add measurements or balances.",
            ReconciliationWarning,
            stacklevel=3,
        )
    f_final = _evaluate(residual, core.xhat.copy(), core.y.copy(), m)
    norm = float(np.linalg.norm(fk if f_final is None else f_final))
    return build_result(
        p, core, method="nonlinear", converged=True, iterations=it, residual_norm=norm
    )


def _halvings():
    alpha = 1.0
    while alpha >= _MIN_STEP:
        yield alpha
        alpha *= 0.5


def _damped_step(Jx, Jy, S, sdiag, is_diag, xk, xm, fk, sd_y):
    """Linearised reconciliation step with a prior of standard deviation ``sd_y`` on ``dy``.

    Minimises ``0.5 |x - xm|^2_S^-1 + 0.5 |dy / sd_y|^2`` subject to
    ``f + Jx dx + Jy dy = 0``: the solution of
    ``(Jx S Jx^T + Jy Dy Jy^T) lam = f + Jx (xm - xk)``, ``x = xm - S Jx^T lam``,
    ``dy = -Dy Jy^T lam``.  Directions of ``y`` that the constraints barely determine
    at this iterate (a nearly rank-deficient ``Jy``) stay put and the measured
    variables take up their share, instead of the huge minimum-norm step.
    Returns ``(dx, dy, lam)``.
    """
    e = xk - xm
    dy_var = sd_y**2
    if sp.issparse(Jx) or sp.issparse(Jy) or sp.issparse(S):
        import scipy.sparse.linalg as spla

        Jx, Jy = sp.csr_matrix(Jx), sp.csr_matrix(Jy)
        SJt = (Jx.multiply(sdiag) if is_diag else Jx @ sp.csr_matrix(S)).T.tocsr()
        DyJt = Jy.multiply(dy_var).T.tocsr()
        M = sp.csc_matrix(Jx @ SJt + Jy @ DyJt)
        try:
            lam = spla.splu(M).solve(fk - Jx @ e)
        except RuntimeError:  # singular: dependent constraints at this iterate
            return np.zeros_like(xk), np.zeros_like(dy_var), np.zeros_like(fk)
        return -e - np.asarray(SJt @ lam).ravel(), -np.asarray(DyJt @ lam).ravel(), lam
    import scipy.linalg

    SJt = (Jx * sdiag).T if is_diag else np.asarray(S @ Jx.T)
    DyJt = (Jy * dy_var).T
    M = Jx @ SJt + Jy @ DyJt
    try:
        lam = scipy.linalg.cho_solve(scipy.linalg.cho_factor(M, lower=True), fk - Jx @ e)
    except np.linalg.LinAlgError:  # dependent constraints at this iterate
        return np.zeros_like(xk), np.zeros_like(dy_var), np.zeros_like(fk)
    return -e - SJt @ lam, -DyJt @ lam, lam


def _restoration(
    residual, m, objective, xk, y, fk, Jx, Jy, grad_obj, row_scale, sd_x, sd_y, radius, mu, merit
):
    """Levenberg-Marquardt steps on the scaled constraint violation, inside the trust region.

    Minimises ``|W (f + Jx dx + Jy dy)|^2 + nu |(dx / sd_x, dy / sd_y)|^2`` with
    ``nu = 1 / radius^2``; the step is then cut to the box of ``radius`` (in units of
    ``sd_x``, ``sd_y``) and accepted by backtracking on the exact-penalty merit
    function (``merit=True``) or on the violation alone (the linearised constraints
    contradict each other: restoration proper).  In the scaled metric a direction
    that the constraints barely determine is expensive to move along, so an
    unmeasured pair that is nearly unobservable at the iterate stays put and the
    measured variables take up the residual.  The radius is quartered after a
    failure and doubled after a full step that used it.

    Returns ``(accepted, radius, x, y, f)``.
    """
    viol = float(np.sum(np.abs(fk) * row_scale))
    phi0 = objective(xk) + mu * viol if merit else viol
    for _ in range(_MAX_SHRINK):
        dx, dy = _lm_step(Jx, Jy, fk, row_scale, sd_x, sd_y, 1.0 / radius**2)
        size = max(
            (np.abs(dx) / sd_x).max(initial=0.0),
            (np.abs(dy) / sd_y).max(initial=0.0),
        )
        if size > radius:
            dx, dy = dx * (radius / size), dy * (radius / size)
        lin_viol = float(np.sum(np.abs(fk + Jx @ dx + Jy @ dy) * row_scale))
        dphi = lin_viol - viol
        if merit:
            dphi = float(grad_obj @ dx) + mu * dphi
        for alpha in _halvings():
            xt, yt = xk + alpha * dx, y + alpha * dy
            ft = _evaluate(residual, xt.copy(), yt.copy(), m)
            if ft is None:
                continue
            phi = float(np.sum(np.abs(ft) * row_scale))
            if merit:
                phi = objective(xt) + mu * phi
            if phi < phi0 + _ARMIJO * alpha * min(dphi, 0.0):
                if alpha == 1.0 and size >= radius:
                    radius = min(2.0 * radius, _RADIUS_MAX)
                return True, radius, xt, yt, ft
        radius = max(radius / 4.0, _RADIUS_MIN)
    return False, radius, xk, y, fk


def _lm_step(Jx, Jy, fk, row_scale, sd_x, sd_y, nu):
    """``(dx, dy)`` minimising ``|W (f + J d)|^2 + nu |d / sd|^2`` (m-by-m system)."""
    w2 = 1.0 / row_scale**2  # residual variances: W^-2
    if sp.issparse(Jx) or sp.issparse(Jy):
        import scipy.sparse.linalg as spla

        Jx, Jy = sp.csr_matrix(Jx), sp.csr_matrix(Jy)
        DxJt = Jx.multiply(sd_x**2).T.tocsr()
        DyJt = Jy.multiply(sd_y**2).T.tocsr()
        M = sp.csc_matrix(Jx @ DxJt + Jy @ DyJt + sp.diags(nu * w2))
        lam = spla.splu(M).solve(fk)
        return -np.asarray(DxJt @ lam).ravel(), -np.asarray(DyJt @ lam).ravel()
    import scipy.linalg

    DxJt = (Jx * sd_x**2).T
    DyJt = (Jy * sd_y**2).T
    M = Jx @ DxJt + Jy @ DyJt
    M[np.diag_indices_from(M)] += nu * w2
    try:
        lam = scipy.linalg.cho_solve(scipy.linalg.cho_factor(M, lower=True), fk)
    except np.linalg.LinAlgError:  # pragma: no cover - nu > 0 keeps M positive definite
        lam = np.linalg.lstsq(M, fk, rcond=None)[0]
    return -DxJt @ lam, -DyJt @ lam


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
    from scipy.linalg.lapack import dpotrs

    # LAPACK directly: the routine scipy.linalg.cho_solve calls
    return dpotrs(chol, d, lower=1)[0]


# ------------------------------------------------------------ decoupled unmeasured
# An unmeasured variable that enters a single constraint row is free in that row: the
# row constrains nothing else and only defines that variable (a power or heat that
# closes one unit's energy balance, the pressure of a liquid whose temperature is
# measured, known through the small (dh/dp)_T alone).  When the iteration stalls,
# such variables are set aside with their rows, the rest is reconciled alone (the
# same estimates, chi2 and dof: the rows set aside constrain nothing else), and each
# variable is then solved from its own row.  A row with no root inside the model's
# domain (a liquid pressure whose estimate would lie below saturation or be negative)
# leaves its variable not observable (nan), as the linear engine reports a variable
# the balances do not determine.


class _Reduced:
    """Residual and Jacobian of the rows kept when decoupled unmeasured variables are set aside.

    ``rows`` are the rows kept and ``keep`` the unmeasured variables kept; the others
    enter none of the kept rows, so their values do not change them.  They are held
    at the first vector of ``fills`` at which the full model can be evaluated (their
    own rows may be outside the model's domain at some of them).
    """

    def __init__(self, residual, jac, rows, keep, fills):
        self.residual = residual
        self.jac = jac
        self.rows = rows
        self.keep = keep
        self.fills = fills

    def _call(self, fn, x, y):
        error = None
        for fill in self.fills:
            v = fill.copy()
            v[self.keep] = y
            try:
                return fn(x, v)
            except (ArithmeticError, ValueError) as exc:
                error = exc
        raise error

    def __call__(self, x, y):
        f = self._call(lambda xx, v: np.asarray(self.residual(xx, v), dtype=float), x, y)
        return f[self.rows]

    def jacobian(self, x, y):
        Jx, Jy = self._call(self.jac, x, y)
        return Jx[self.rows], Jy[self.rows][:, self.keep]


def _dense_row(J, r):
    if sp.issparse(J):
        return np.asarray(sp.csr_matrix(J)[r].toarray(), dtype=float).ravel()
    return np.array(J[r], dtype=float)


def _solve_decoupled(
    residual, jac, xm, cov, y_start, x_last, y_last, m, row_scale, y_scale, tol, max_iter, it
):
    """Reconcile with the single-row unmeasured variables set aside, then solve their rows.

    Returns the :class:`Reconciliation` of the whole problem, or None when there is
    nothing to set aside or the reduced problem does not converge either (the caller
    then raises its ConvergenceError).  The reduced problem starts from ``y_start``
    and has its own ``max_iter`` linearisations.
    """
    import dataclasses

    from perftest.errors import PerftestError

    k = y_start.size
    try:
        # The sparsity of Jy at two points (start and last iterate), so that a
        # derivative that happens to vanish at one of them is not taken for a gap.
        pattern = None
        for xx, yy in ((xm, y_start), (x_last, y_last)):
            Jy = abs(sp.csc_matrix(jac(xx, yy)[1]))
            pattern = Jy if pattern is None else pattern + Jy
    except (ArithmeticError, ValueError):
        return None
    pattern = sp.csc_matrix(pattern)
    pattern.eliminate_zeros()
    decoupled = np.flatnonzero(np.diff(pattern.indptr) == 1)
    if decoupled.size == 0:
        return None
    row_of = pattern.indices[pattern.indptr[decoupled]]
    rows = np.setdiff1d(np.arange(m), row_of)
    keep = np.setdiff1d(np.arange(k), decoupled)
    if rows.size == 0:
        return None
    red = _Reduced(residual, jac, rows, keep, (y_start, y_last))
    try:
        inner = reconcile_nonlinear(
            red, xm, cov, y0=y_start[keep], jacobian=red.jacobian, tol=tol,
            max_iter=max_iter, y_scale=y_scale[keep],
        )  # fmt: skip
    except PerftestError:
        return None

    # Each decoupled variable from its own row.  It is not determined when it shares
    # the row with another decoupled variable or with an unobservable one.
    obs_keep = np.asarray(inner.observable, dtype=bool)
    unobs = np.zeros(k, dtype=bool)
    unobs[keep[~obs_keep]] = True
    by_row = pattern.tocsr()
    shared = np.bincount(row_of, minlength=m)[row_of] > 1
    y_full = y_start.copy()
    y_full[keep] = np.where(obs_keep, inner.y, y_start[keep])
    x_hat = np.asarray(inner.x, dtype=float)
    found = np.zeros(decoupled.size, dtype=bool)
    grads = []
    for i, (j, r) in enumerate(zip(decoupled, row_of, strict=True)):
        cols = by_row.indices[by_row.indptr[r] : by_row.indptr[r + 1]]
        if shared[i] or unobs[cols].any():
            continue
        out = None
        for t0 in (y_start[j], y_last[j]):
            y_full[j] = t0
            out = _root_in_row(residual, jac, x_hat, y_full, j, r, m, row_scale[r], tol, max_iter)
            if out is not None:
                break
        if out is None:
            y_full[j] = y_start[j]
            continue
        y_full[j], jx, jy = out
        found[i] = True
        grads.append((-jx / jy[j], -jy[keep] / jy[j]))
    F = decoupled[found]
    n = x_hat.size
    Gx = np.array([g[0] for g in grads]).reshape(F.size, n)
    Gy = np.array([g[1] for g in grads]).reshape(F.size, keep.size)

    # Covariances by first-order propagation through the rows (implicit function):
    # dy_j = -(J_x dx + J_y,keep dy_keep) / (dr / dy_j).
    x_cov = np.asarray(inner.x_cov, dtype=float)
    yk = np.asarray(inner.y_cov, dtype=float)
    xyk = np.asarray(inner.xy_cov, dtype=float)
    Yc, XYc = np.nan_to_num(yk), np.nan_to_num(xyk)  # Gy is 0 on unobservable columns
    cFx = Gx @ x_cov + Gy @ XYc.T
    cFk = Gx @ XYc + Gy @ Yc
    cFF = cFx @ Gx.T + cFk @ Gy.T
    y_cov = np.full((k, k), np.nan)
    y_cov[np.ix_(keep, keep)] = yk
    y_cov[np.ix_(F, keep)] = cFk
    y_cov[np.ix_(keep, F)] = cFk.T
    y_cov[np.ix_(F, F)] = cFF
    y_cov[unobs, :] = np.nan
    y_cov[:, unobs] = np.nan
    xy_cov = np.full((n, k), np.nan)
    xy_cov[:, keep] = xyk
    xy_cov[:, F] = cFx.T
    covs = (x_cov, y_cov, xy_cov)

    y = np.full(k, np.nan)
    y[keep] = inner.y
    y[F] = y_full[F]
    observable = np.zeros(k, dtype=bool)
    observable[keep] = obs_keep
    observable[F] = True
    y_u = np.full(k, np.nan)
    y_u[keep] = inner.y_u
    y_u[F] = np.sqrt(np.maximum(np.diag(cFF), 0.0))
    # Residual norm over every row but those of the variables left undetermined.
    closed = np.setdiff1d(np.arange(m), row_of[~found])
    f_final = _evaluate(residual, x_hat.copy(), y_full.copy(), m)
    norm = inner.residual_norm if f_final is None else float(np.linalg.norm(f_final[closed]))
    return dataclasses.replace(
        inner,
        y=y,
        observable=observable,
        y_u=y_u,
        iterations=it + inner.iterations,
        residual_norm=norm,
        covariance_source=lambda: covs,
        # the nodal test's rows name rows of the reduced problem: name them in full
        constraint_rows=rows[np.asarray(inner.constraint_rows, dtype=int)],
    )


def _root_in_row(residual, jac, x, y, j, r, m, row_scale, tol, max_iter):
    """Newton iteration on row ``r`` for ``y[j]`` alone, halving steps that do not lower |f_r|.

    Returns ``(y_j, Jx[r], Jy[r])`` at the root (row below ``tol`` standard
    deviations), or None when no root is reached inside the model's domain.
    """
    y = y.copy()
    f = _evaluate(residual, x.copy(), y.copy(), m)
    if f is None:
        return None
    for _ in range(max_iter):
        try:
            Jx, Jy = jac(x, y)
        except (ArithmeticError, ValueError):
            return None
        jx, jy = _dense_row(Jx, r), _dense_row(Jy, r)
        if abs(f[r]) * row_scale <= tol:
            return float(y[j]), jx, jy
        if not (np.isfinite(jy[j]) and jy[j] != 0.0):
            return None
        step = -f[r] / jy[j]
        for alpha in _halvings():
            yt = y.copy()
            yt[j] += alpha * step
            ft = _evaluate(residual, x.copy(), yt.copy(), m)
            if ft is not None and abs(ft[r]) < abs(f[r]):
                y, f = yt, ft
                break
        else:
            return None
    return None
