"""Correction tables over two condition variables (bilinear interpolation).

Some corrections depend on two conditions at once: output against ambient
temperature *and* humidity, heat rate against cooling-water temperature *and*
load.  A :class:`CorrectionSurface` is the two-variable counterpart of
:class:`perftest.evaluation.corrections.CorrectionCurve`, with the same conventions (factor
or offset, 1 or 0 at the reference point, no extrapolation) and the same
interface to :func:`perftest.evaluation.corrections.apply_corrections` (``variables``,
``__call__``, ``partials``).
"""

from __future__ import annotations

import math
from dataclasses import KW_ONLY, dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import InputError

__all__ = ["CorrectionSurface"]

_KINDS = ("multiplicative", "additive")
_TOLERANCE = 1e-6  # on the value at the reference point, as for curves


def _num(values):
    if isinstance(values, pd.Series):
        return values.to_numpy(dtype=float, na_value=np.nan)
    return np.asarray(values, dtype=float)


def _like(result, template):
    if isinstance(template, pd.Series):
        return pd.Series(np.asarray(result, dtype=float), index=template.index, name=template.name)
    if np.ndim(result) == 0:
        return float(result)
    return np.asarray(result, dtype=float)


@dataclass(frozen=True, eq=False)
class CorrectionSurface:
    """A correction table of two condition variables.

    Parameters
    ----------
    variable, second_variable : str
        Condition variables of the rows (``x``) and columns (``y``) of ``values``.
    x, y : sequence of float [SI]
        Strictly increasing grid lines, at least two each.
    values : sequence of sequences of float
        ``values[i][j]`` at ``(x[i], y[j])``: factors [-] or offsets [result unit].
    reference, second_reference : float [SI]
        Reference point of the two variables.
    kind : {"multiplicative", "additive"}
    name, result : str, optional
        As for :class:`~perftest.evaluation.corrections.CorrectionCurve`.

    Raises
    ------
    InputError
        Malformed grid, reference outside the grid, or a value at the reference
        point other than 1 (multiplicative) / 0 (additive).

    Notes
    -----
    Bilinear interpolation in the cell :math:`[x_i, x_{i+1}]\\times[y_j, y_{j+1}]`
    with :math:`t = (x - x_i)/(x_{i+1} - x_i)`, :math:`s = (y - y_j)/(y_{j+1} - y_j)`:

    .. math:: f = (1-t)(1-s)f_{ij} + t(1-s)f_{i+1,j} + (1-t)s f_{i,j+1} + ts f_{i+1,j+1}

    (the ``method="linear"`` rule of ``scipy.interpolate.RegularGridInterpolator``).
    Partial derivatives are those of the cell; on an interior grid line, where
    they jump, the mean of the two adjacent cells (as for curves).

    Examples
    --------
    >>> s = CorrectionSurface("T", "RH", x=[280.0, 300.0], y=[0.2, 0.8],
    ...                       values=[[1.02, 1.01], [0.99, 0.97]],
    ...                       reference=290.0, second_reference=0.5,
    ...                       result="net_power", normalize=True)
    >>> round(s(290.0, 0.5), 12)
    1.0
    """

    variable: str
    second_variable: str
    x: tuple
    y: tuple
    values: tuple
    _: KW_ONLY
    reference: float
    second_reference: float
    kind: str = "multiplicative"
    name: str | None = None
    result: str | None = None
    normalize: bool = False
    _xa: np.ndarray = field(init=False, repr=False)
    _ya: np.ndarray = field(init=False, repr=False)
    _va: np.ndarray = field(init=False, repr=False)

    def __post_init__(self):
        set_ = object.__setattr__
        label = self.name or (
            f"{self.result or 'correction'} vs {self.variable} and {self.second_variable}"
        )
        set_(self, "name", label)
        where = f"Correction table '{label}'"
        if self.kind not in _KINDS:
            raise InputError(
                f"{where}: 'kind' must be one of {_KINDS}. Got {self.kind!r}.", parameter="kind"
            )
        try:
            xa = np.asarray(self.x, dtype=float)
            ya = np.asarray(self.y, dtype=float)
            va = np.asarray(self.values, dtype=float)
            ref = float(self.reference)
            ref2 = float(self.second_reference)
        except (TypeError, ValueError):
            raise InputError(
                f"{where}: 'x', 'y', 'values' and the references must be numbers "
                "('values' one row of len(y) numbers per x).",
                parameter="values",
            ) from None
        for name, a in (("x", xa), ("y", ya)):
            if a.ndim != 1 or a.size < 2 or not np.all(np.isfinite(a)) or np.any(np.diff(a) <= 0):
                raise InputError(
                    f"{where}: '{name}' must hold at least two finite, strictly increasing "
                    f"values. Got {a.tolist()}.",
                    parameter=name,
                )
        if va.shape != (xa.size, ya.size) or not np.all(np.isfinite(va)):
            raise InputError(
                f"{where}: 'values' must be {xa.size} rows (one per x) of {ya.size} finite "
                f"numbers (one per y). Got shape {va.shape}.",
                parameter="values",
            )
        for name, r, a in (("reference", ref, xa), ("second_reference", ref2, ya)):
            if not (math.isfinite(r) and a[0] <= r <= a[-1]):
                raise InputError(
                    f"{where}: '{name}' {r:g} lies outside the table's range "
                    f"[{a[0]:g}, {a[-1]:g}].",
                    parameter=name,
                )
        set_(self, "reference", ref)
        set_(self, "second_reference", ref2)
        set_(self, "_xa", xa)
        set_(self, "_ya", ya)
        set_(self, "_va", va)
        at_ref = float(self._evaluate(np.asarray(ref), np.asarray(ref2))[0])
        if self.normalize:
            if self.kind == "multiplicative":
                if at_ref == 0:
                    raise InputError(
                        f"{where}: cannot normalise a table that is 0 at the reference.",
                        parameter="values",
                    )
                va = va / at_ref
            else:
                va = va - at_ref
            set_(self, "_va", va)
            at_ref = float(self._evaluate(np.asarray(ref), np.asarray(ref2))[0])
        want = 1.0 if self.kind == "multiplicative" else 0.0
        scale = 1.0 if self.kind == "multiplicative" else max(float(np.max(np.abs(va))), 1e-300)
        if abs(at_ref - want) > _TOLERANCE * scale:
            raise InputError(
                f"{where}: a {self.kind} table must equal {want:g} at the reference point "
                f"({ref:g}, {ref2:g}). Got {at_ref:.9g}. Normalise it (normalize=True) or "
                "check the references.",
                parameter="values",
            )
        set_(self, "x", tuple(xa.tolist()))
        set_(self, "y", tuple(ya.tolist()))
        set_(self, "values", tuple(tuple(r) for r in va.tolist()))

    @property
    def variables(self) -> tuple[str, str]:
        """The two condition variables, in the order of ``__call__``."""
        return (self.variable, self.second_variable)

    @property
    def references(self) -> tuple[float, float]:
        """Reference point [SI]."""
        return (self.reference, self.second_reference)

    def _cells(self, xv, yv):
        xa, ya = self._xa, self._ya
        i = np.clip(np.searchsorted(xa, xv, side="right") - 1, 0, xa.size - 2)
        j = np.clip(np.searchsorted(ya, yv, side="right") - 1, 0, ya.size - 2)
        return i, j

    def _evaluate(self, xv, yv, i=None, j=None):
        xv, yv = np.broadcast_arrays(np.atleast_1d(xv), np.atleast_1d(yv))
        if i is None:
            i, j = self._cells(xv, yv)
        xa, ya, v = self._xa, self._ya, self._va
        t = (xv - xa[i]) / (xa[i + 1] - xa[i])
        s = (yv - ya[j]) / (ya[j + 1] - ya[j])
        return (
            (1 - t) * (1 - s) * v[i, j]
            + t * (1 - s) * v[i + 1, j]
            + (1 - t) * s * v[i, j + 1]
            + t * s * v[i + 1, j + 1]
        )

    def _check(self, x, y):
        xv, yv = _num(x), _num(y)
        for name, val, a in ((self.variable, xv, self._xa), (self.second_variable, yv, self._ya)):
            with np.errstate(invalid="ignore"):
                out = (val < a[0]) | (val > a[-1])
            if np.any(out):
                bad = float(np.asarray(val)[out].ravel()[0]) if np.ndim(val) else float(val)
                raise InputError(
                    f"Correction table '{self.name}': {name} = {bad:g} lies outside the "
                    f"table's range [{a[0]:g}, {a[-1]:g}]; tables are not extrapolated.",
                    parameter=name,
                )
        return xv, yv

    def __call__(self, x, y):
        """Table value at ``(x, y)`` [SI]: factor [-] or offset [result unit]."""
        xv, yv = self._check(x, y)
        out = self._evaluate(xv, yv)
        shape = np.broadcast(xv, yv).shape
        return _like(out.reshape(shape) if shape else out[0], x)

    def _slopes(self, xv, yv, axis: int):
        """Partial derivative along ``axis`` (0: x, 1: y) with the grid-line rule."""
        xa, ya, v = self._xa, self._ya, self._va
        grid, val = (xa, xv) if axis == 0 else (ya, yv)
        i, j = self._cells(xv, yv)

        def cell_slope(i, j):
            t = (xv - xa[i]) / (xa[i + 1] - xa[i])
            s = (yv - ya[j]) / (ya[j + 1] - ya[j])
            if axis == 0:
                return ((1 - s) * (v[i + 1, j] - v[i, j]) + s * (v[i + 1, j + 1] - v[i, j + 1])) / (
                    xa[i + 1] - xa[i]
                )
            return ((1 - t) * (v[i, j + 1] - v[i, j]) + t * (v[i + 1, j + 1] - v[i + 1, j])) / (
                ya[j + 1] - ya[j]
            )

        d = cell_slope(i, j)
        k = grid.size
        pos = np.searchsorted(grid, val)
        posc = np.clip(pos, 1, k - 2) if k > 2 else np.ones_like(pos)
        at_line = (pos > 0) & (pos < k - 1) & (grid[np.minimum(posc, k - 1)] == val)
        if np.any(at_line):
            if axis == 0:
                left = cell_slope(np.clip(posc - 1, 0, k - 2), j)
                right = cell_slope(np.clip(posc, 0, k - 2), j)
            else:
                left = cell_slope(i, np.clip(posc - 1, 0, k - 2))
                right = cell_slope(i, np.clip(posc, 0, k - 2))
            d = np.where(at_line, 0.5 * (left + right), d)
        return d

    def partials(self, x, y):
        """``(df/dx, df/dy)`` at ``(x, y)`` [curve unit / variable unit].

        Examples
        --------
        >>> s = CorrectionSurface("T", "RH", x=[0.0, 1.0], y=[0.0, 1.0],
        ...                       values=[[1.0, 1.2], [1.1, 1.5]],
        ...                       reference=0.0, second_reference=0.0)
        >>> [round(v, 12) for v in s.partials(0.5, 0.5)]
        [0.2, 0.3]
        """
        xv, yv = self._check(x, y)
        xb, yb = np.broadcast_arrays(np.atleast_1d(xv), np.atleast_1d(yv))
        shape = np.broadcast(xv, yv).shape
        out = []
        for axis in (0, 1):
            d = self._slopes(xb, yb, axis)
            d = np.where(np.isnan(xb) | np.isnan(yb), np.nan, d)
            out.append(_like(d.reshape(shape) if shape else d[0], x))
        return tuple(out)
