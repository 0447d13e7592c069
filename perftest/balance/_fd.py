"""Central-difference Jacobians for residuals given without derivatives.

Layer: imports numpy only.
"""

from __future__ import annotations

import numpy as np

__all__ = ["finite_difference_jacobian"]

_EPS = np.finfo(float).eps
# Central differences: the step eps**(1/3) * scale balances truncation
# (~h^2) against rounding (~eps/h) errors.
_FD_REL = _EPS ** (1.0 / 3.0)


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
