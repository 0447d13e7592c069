"""Corrections to reference conditions and comparison with guarantees.

A test never runs exactly at the conditions a guarantee refers to (ambient
temperature, cooling-water temperature, barometric pressure, ...).  Each
:class:`CorrectionCurve` says how much the measured result differs, at the
condition actually met, from what it would have been at the reference
condition.  :func:`apply_corrections` removes those differences, and a
:class:`Guarantee` compares the corrected result, with its expanded
uncertainty, with the guaranteed value.

Convention
----------
Multiplicative curves give a factor :math:`f(x)` and additive curves an offset
:math:`g(x)` [result unit] such that

.. math:: R_{measured} = \\Big(\\prod_i f_i(x_i)\\Big)\\, R_{reference} + \\sum_j g_j(x_j)

hence :math:`R_{corrected} = (R_{measured} - \\sum_j g_j) / \\prod_i f_i`: additive
offsets are subtracted first, then the result is divided by the factors.  At the
reference condition a factor is 1 and an offset 0; a curve that is not (within
1e-6, relative to its own scale for offsets) is rejected, because it would shift
every result even at reference conditions.  :meth:`CorrectionCurve.from_points`
normalises raw curves.  Curves are interpolated linearly and never extrapolated.

References
----------
.. [1] JCGM 100:2008 (GUM), clause 3.2.3-3.2.4 (corrections for recognised
   systematic effects) and clause 5.1 (their uncertainty).
.. [2] JCGM 106:2012, *Evaluation of measurement data - The role of measurement
   uncertainty in conformity assessment*, 2012, clause 8 (guarded acceptance and
   guarded rejection; clause number from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping
from dataclasses import KW_ONLY, dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import InputError, PlantFileError
from perftest.evaluation.correction_surface import CorrectionSurface
from perftest.evaluation.guarantees import (
    DEFAULT_RULE,
    DIRECTIONS,
    RULES,
    VERDICTS,
    Guarantee,
    _entries,
    guarantee_from_table,
    guarantees_from_plant,
)

__all__ = [
    "CorrectionCurve",
    "CorrectionSurface",
    "Guarantee",
    "apply_corrections",
    "correction_sensitivities",
    "curve_from_table",
    "guarantee_from_table",
    "curves_from_plant",
    "guarantees_from_plant",
    "KINDS",
    "DIRECTIONS",
    "VERDICTS",
    "RULES",
    "DEFAULT_RULE",
]

KINDS = ("multiplicative", "additive")

#: Tolerance on the curve value at the reference (1 or 0); see the module notes.
NORMALISATION_TOLERANCE = 1e-6


def _floats(values, what: str) -> tuple[float, ...]:
    try:
        arr = np.atleast_1d(np.asarray(values, dtype=float))
    except (TypeError, ValueError):
        raise InputError(f"{what} must be numeric. Got {values!r}.") from None
    if arr.ndim != 1:
        raise InputError(f"{what} must be one-dimensional. Got shape {arr.shape}.")
    return tuple(float(v) for v in arr)


def _num(values):
    if isinstance(values, pd.Series):
        return values.to_numpy(dtype=float, na_value=np.nan)
    return np.asarray(values, dtype=float)


def _like(result: np.ndarray, template):
    if isinstance(template, pd.Series):
        return pd.Series(result, index=template.index, name=template.name)
    if np.ndim(result) == 0:
        return float(result)
    return result


@dataclass(frozen=True, eq=False)
class CorrectionCurve:
    """A correction curve or polynomial for one result and one condition variable.

    Parameters
    ----------
    variable : str
        Name of the condition variable (tag or model variable), looked up in the
        ``conditions`` given to :func:`apply_corrections`.
    x : sequence of float, optional [SI]
        Strictly increasing break points of the curve.
    y : sequence of float, optional
        Curve values at ``x``: factors [-] (multiplicative) or offsets [result
        unit, SI] (additive).
    reference : float [SI]
        Reference value of the variable.
    kind : {"multiplicative", "additive"}
    polynomial : sequence of float, optional
        Coefficients :math:`c_0, c_1, ...` in ascending powers of the deviation
        :math:`x - x_{ref}` [SI], instead of ``x``/``y``.
    name : str, optional
        Name shown in messages (default ``"<result> vs <variable>"``).
    result : str, optional
        The result it corrects (``net_power``, ``heat_rate``, ...).
    valid_range : (float, float), optional [SI]
        Range of validity of a polynomial (a table's range is its ``x`` span).

    Raises
    ------
    InputError
        If the curve is malformed, the reference lies outside its range, or the
        curve is not 1 (multiplicative) / 0 (additive) at the reference.

    Notes
    -----
    Table: linear interpolation between break points,

    .. math:: f(x) = y_k + (y_{k+1} - y_k)\\frac{x - x_k}{x_{k+1} - x_k},
              \\quad x_k \\le x \\le x_{k+1}

    Polynomial: :math:`f(x) = \\sum_k c_k (x - x_{ref})^k`.

    Examples
    --------
    >>> c = CorrectionCurve("T_amb", x=[278.15, 288.15, 298.15], y=[1.02, 1.0, 0.97],
    ...                     reference=288.15, result="net_power")
    >>> round(c(293.15), 6)
    0.985
    """

    variable: str
    x: tuple[float, ...] | None = None
    y: tuple[float, ...] | None = None
    _: KW_ONLY
    reference: float
    kind: str = "multiplicative"
    polynomial: tuple[float, ...] | None = None
    name: str | None = None
    result: str | None = None
    valid_range: tuple[float, float] | None = None
    _xa: np.ndarray = field(init=False, repr=False)
    _ya: np.ndarray = field(init=False, repr=False)

    def __post_init__(self):
        set_ = object.__setattr__
        label = self.name or f"{self.result or 'correction'} vs {self.variable}"
        set_(self, "name", label)
        where = f"Correction curve '{label}'"
        if self.kind not in KINDS:
            raise InputError(
                f"{where}: 'kind' must be one of {KINDS}. Got {self.kind!r}.", parameter="kind"
            )
        ref = float(self.reference)
        if not math.isfinite(ref):
            raise InputError(
                f"{where}: 'reference' must be finite. Got {self.reference!r}.",
                parameter="reference",
            )
        set_(self, "reference", ref)
        table = self.x is not None or self.y is not None
        if table == (self.polynomial is not None):
            raise InputError(
                f"{where}: give either the table 'x' and 'y' or 'polynomial', not both "
                "and not neither.",
                parameter="polynomial" if table else "x",
            )
        if table:
            if self.x is None or self.y is None:
                raise InputError(f"{where}: a table needs both 'x' and 'y'.", parameter="x")
            x = _floats(self.x, f"{where}: 'x'")
            y = _floats(self.y, f"{where}: 'y'")
            if len(x) != len(y) or len(x) < 2:
                raise InputError(
                    f"{where}: 'x' and 'y' must have the same length, at least 2. "
                    f"Got {len(x)} and {len(y)}.",
                    parameter="y",
                )
            xa, ya = np.array(x), np.array(y)
            if not (np.all(np.isfinite(xa)) and np.all(np.isfinite(ya))):
                raise InputError(f"{where}: 'x' and 'y' must be finite.", parameter="x")
            if np.any(np.diff(xa) <= 0):
                raise InputError(
                    f"{where}: 'x' must be strictly increasing. Got {list(x)}.", parameter="x"
                )
            if self.valid_range is not None:
                raise InputError(
                    f"{where}: 'valid_range' is for polynomials; a table is valid over its 'x'.",
                    parameter="valid_range",
                )
            set_(self, "x", x)
            set_(self, "y", y)
            set_(self, "_xa", xa)
            set_(self, "_ya", ya)
            scale = float(np.max(np.abs(ya)))
        else:
            coef = _floats(self.polynomial, f"{where}: 'polynomial'")
            if len(coef) == 0 or not all(math.isfinite(c) for c in coef):
                raise InputError(
                    f"{where}: 'polynomial' must hold finite coefficients.", parameter="polynomial"
                )
            set_(self, "polynomial", coef)
            set_(self, "_xa", np.array([]))
            set_(self, "_ya", np.array(coef))
            if self.valid_range is not None:
                lo, hi = _floats(self.valid_range, f"{where}: 'valid_range'")
                if not lo < hi:
                    raise InputError(
                        f"{where}: 'valid_range' must be (low, high) with "
                        f"low < high. Got {(lo, hi)}.",
                        parameter="valid_range",
                    )
                set_(self, "valid_range", (lo, hi))
            scale = float(np.max(np.abs(coef)))
        lo, hi = self.range
        if not lo <= ref <= hi:
            raise InputError(
                f"{where}: 'reference' {ref:g} lies outside the curve's range [{lo:g}, {hi:g}].",
                parameter="reference",
            )
        at_ref = float(self._evaluate(np.asarray(ref)))
        if self.kind == "multiplicative":
            bad = abs(at_ref - 1.0) > NORMALISATION_TOLERANCE
            want = "1"
        else:
            bad = abs(at_ref) > NORMALISATION_TOLERANCE * max(scale, 1e-300)
            want = "0"
        if bad:
            raise InputError(
                f"{where}: a {self.kind} curve must equal {want} at the reference "
                f"{ref:g}. Got {at_ref:.9g}. Normalise it (CorrectionCurve.from_points(..., "
                "normalize=True)) or check the reference.",
                parameter="y" if table else "polynomial",
            )

    # ------------------------------------------------------------------ construction

    @classmethod
    def from_points(
        cls,
        variable: str,
        x,
        y,
        *,
        reference: float,
        kind: str = "multiplicative",
        normalize: bool = True,
        **kwargs,
    ) -> CorrectionCurve:
        """Build a table curve, optionally normalised to 1 (or 0) at the reference.

        Multiplicative values are divided by their interpolated value at the
        reference, additive ones have it subtracted.

        Examples
        --------
        >>> c = CorrectionCurve.from_points("T", [280.0, 300.0], [98.0, 102.0],
        ...                                 reference=290.0)
        >>> c.y
        (0.98, 1.02)
        """
        xa = np.asarray(x, dtype=float)
        ya = np.asarray(y, dtype=float)
        if normalize and xa.ndim == 1 and xa.shape == ya.shape and xa.size >= 2:
            if np.all(np.diff(xa) > 0) and xa[0] <= reference <= xa[-1]:
                at_ref = float(np.interp(reference, xa, ya))
                if kind == "multiplicative":
                    if at_ref == 0:
                        raise InputError(
                            f"Correction curve for '{variable}': cannot normalise a "
                            "multiplicative curve that is 0 at the reference.",
                            parameter="y",
                        )
                    ya = ya / at_ref
                else:
                    ya = ya - at_ref
        return cls(
            variable,
            tuple(xa.tolist()),
            tuple(ya.tolist()),
            reference=reference,
            kind=kind,
            **kwargs,
        )

    # ------------------------------------------------------------------ evaluation

    @property
    def variables(self) -> tuple[str]:
        """The condition variable, as a 1-tuple (the interface shared with tables)."""
        return (self.variable,)

    def partials(self, x) -> tuple:
        """``(df/dx,)``: :meth:`derivative` as a 1-tuple (interface shared with tables)."""
        return (self.derivative(x),)

    @property
    def range(self) -> tuple[float, float]:
        """Range of the variable over which the curve may be used [SI]."""
        if self.polynomial is None:
            return float(self._xa[0]), float(self._xa[-1])
        if self.valid_range is not None:
            return self.valid_range
        return -math.inf, math.inf

    def _evaluate(self, xv: np.ndarray) -> np.ndarray:
        if self.polynomial is None:
            return np.interp(xv, self._xa, self._ya)
        return np.polynomial.polynomial.polyval(xv - self.reference, self._ya)

    def _check(self, x) -> np.ndarray:
        xv = _num(x)
        lo, hi = self.range
        if xv.ndim == 0:  # one number: Python floats, the same verdict (NaN passes)
            bad = float(xv)
            out = bad < lo or bad > hi
        else:
            with np.errstate(invalid="ignore"):
                mask = (xv < lo) | (xv > hi)
            out = bool(mask.any())
            if out:
                bad = float(np.broadcast_to(xv, mask.shape)[mask].ravel()[0])
        if out:
            raise InputError(
                f"Correction curve '{self.name}': {self.variable} = {bad:g} lies outside the "
                f"curve's range [{lo:g}, {hi:g}]; curves are not extrapolated. Extend the "
                "curve or use a run within its range.",
                parameter=self.variable,
            )
        return xv

    def __call__(self, x):
        """Curve value at ``x`` [SI]: factor [-] or offset [result unit].

        Raises
        ------
        InputError
            If a value lies outside the curve's range (NaN passes through).
        """
        xv = self._check(x)
        return _like(self._evaluate(xv), x)

    def derivative(self, x):
        """Slope of the curve at ``x`` [curve unit / variable unit].

        For a table the slope of the segment holding ``x``; at an interior break
        point, where the slope jumps, the mean of the two adjacent slopes (the
        central-difference value); at the ends, the one-sided slope.  Used for the
        sensitivity of a corrected result to its condition variable.

        Examples
        --------
        >>> c = CorrectionCurve("T", x=[0.0, 1.0, 2.0], y=[1.0, 1.1, 1.3], reference=0.0)
        >>> round(c.derivative(0.5), 12), round(c.derivative(1.0), 12)
        (0.1, 0.15)
        """
        xv = self._check(x)
        if self.polynomial is None:
            slopes = np.diff(self._ya) / np.diff(self._xa)
            k = self._xa.size
            seg = np.clip(np.searchsorted(self._xa, xv, side="right") - 1, 0, k - 2)
            d = slopes[seg]
            pos = np.searchsorted(self._xa, xv)
            interior = (pos > 0) & (pos < k - 1)
            posc = np.clip(pos, 1, k - 2)
            at_break = interior & (self._xa[posc] == xv)
            d = np.where(at_break, 0.5 * (slopes[posc - 1] + slopes[np.minimum(posc, k - 2)]), d)
            d = np.where(np.isnan(xv), np.nan, d)
        else:
            der = np.polynomial.polynomial.polyder(self._ya)
            d = np.polynomial.polynomial.polyval(xv - self.reference, der)
        return _like(np.asarray(d, dtype=float), x)


# --------------------------------------------------------------------------- applying


def _condition(conditions, curve) -> list:
    """Condition values of every variable of ``curve`` (curve or table)."""
    out = []
    for var in curve.variables:
        try:
            out.append(conditions[var])
        except (KeyError, IndexError, TypeError):
            raise InputError(
                f"The 'conditions' parameter of apply_corrections must give a value for "
                f"'{var}', a variable of correction curve '{curve.name}'.",
                parameter="conditions",
            ) from None
    return out


def _curves(curves) -> list:
    if isinstance(curves, CorrectionCurve | CorrectionSurface):
        return [curves]
    out = list(curves)
    for c in out:
        if not isinstance(c, CorrectionCurve | CorrectionSurface):
            raise InputError(
                "The 'curves' parameter of apply_corrections must hold CorrectionCurve "
                f"or CorrectionSurface objects. Got {type(c).__name__}.",
                parameter="curves",
            )
    return out


def _factors(curves, conditions):
    factor = 1.0
    offset = 0.0
    for c in curves:
        v = _num(c(*_condition(conditions, c)))
        if c.kind == "multiplicative":
            factor = factor * v
        else:
            offset = offset + v
    return factor, offset


def apply_corrections(value, curves: Iterable[CorrectionCurve], conditions: Mapping):
    """Correct a measured result to reference conditions.

    Parameters
    ----------
    value : float, array or Series [SI]
        Measured result.
    curves : CorrectionCurve, CorrectionSurface or iterable of them
        The curves (and two-variable tables) that apply to this result.
    conditions : mapping (dict, Series or DataFrame)
        Value of each curve's variables during the test [SI].

    Returns
    -------
    float, array or Series [SI]
        Corrected result.

    Raises
    ------
    InputError
        If a condition is missing or outside a curve's range (no extrapolation),
        or a multiplicative factor is zero.

    Notes
    -----
    .. math:: R_{corrected} = \\frac{R_{measured} - \\sum_j g_j(x_j)}{\\prod_i f_i(x_i)}

    (see the module notes for the convention; [1]_ 3.2.3-3.2.4).

    Examples
    --------
    >>> c = CorrectionCurve("T_amb", x=[278.15, 298.15], y=[1.02, 0.98], reference=288.15)
    >>> round(apply_corrections(98.0e6, [c], {"T_amb": 298.15}), 3)
    100000000.0
    """
    cs = _curves(curves)
    factor, offset = _factors(cs, conditions)
    if (np.asarray(factor) == 0).any():
        raise InputError(
            "apply_corrections: a multiplicative correction factor is 0; the curves cannot "
            "be inverted there.",
            parameter="curves",
        )
    out = (_num(value) - offset) / factor
    return _like(np.asarray(out, dtype=float), value)


def correction_sensitivities(value, curves: Iterable[CorrectionCurve], conditions: Mapping):
    """Partial derivatives of the corrected result, for uncertainty propagation.

    Parameters
    ----------
    value : float [SI]
        Measured result.
    curves, conditions
        As for :func:`apply_corrections`.

    Returns
    -------
    dict
        ``{"value": dR_c/dR_m, <variable>: dR_c/dx, ...}`` (one entry per distinct
        variable; curves sharing a variable are summed).

    Notes
    -----
    With :math:`F = \\prod_i f_i`, :math:`G = \\sum_j g_j` and
    :math:`R_c = (R_m - G)/F`:

    .. math::
        \\frac{\\partial R_c}{\\partial R_m} = \\frac1F, \\quad
        \\frac{\\partial R_c}{\\partial x_i} = -R_c\\,\\frac{f_i'(x_i)}{f_i(x_i)}
        \\;(\\text{multiplicative}), \\quad
        \\frac{\\partial R_c}{\\partial x_j} = -\\frac{g_j'(x_j)}{F}
        \\;(\\text{additive})

    The uncertainty of the curve itself is not included; add it as a separate
    input when the curve's supplier states one.

    Examples
    --------
    >>> c = CorrectionCurve("T", x=[280.0, 300.0], y=[1.02, 0.98], reference=290.0)
    >>> s = correction_sensitivities(100.0, [c], {"T": 290.0})
    >>> round(s["value"], 12), round(s["T"], 12)
    (1.0, 0.2)
    """
    cs = _curves(curves)
    factor, offset = _factors(cs, conditions)
    corrected = (_num(value) - offset) / factor
    out: dict = {"value": _like(np.asarray(1.0 / factor, dtype=float), value)}
    for c in cs:
        xv = _condition(conditions, c)
        at = _num(c(*xv))
        for var, d in zip(c.variables, c.partials(*xv), strict=True):
            d = _num(d)
            term = -corrected * d / at if c.kind == "multiplicative" else -d / factor
            prev = out.get(var, 0.0)
            out[var] = _like(np.asarray(_num(prev) + term, dtype=float), value)
    return out


# --------------------------------------------------------------------------- plant file


Converter = Callable[..., object]


def _default_convert() -> Converter:
    try:
        from perftest.units import to_si
    except ImportError:  # pragma: no cover - units ships with perftest
        raise InputError(
            "curve_from_table needs a 'convert' callback (values, unit, difference=False) "
            "when perftest.units is not available.",
            parameter="convert",
        ) from None

    def convert(values, unit, difference=False):
        return to_si(values, unit, difference=difference)

    return convert


def _si(convert: Converter, values, unit, difference: bool = False):
    if unit is None:
        return values
    return convert(values, unit, difference=difference)


def _value_unit(entry, key: str, file):
    """``{value, unit}`` inline table or a bare number -> (value, unit or None)."""
    if isinstance(entry, Mapping):
        if "value" not in entry:
            raise PlantFileError(f"Plant file key '{key}' needs a 'value'.", key=key, file=file)
        return entry["value"], entry.get("unit")
    return entry, None


def curve_from_table(
    table: Mapping,
    *,
    convert: Converter | None = None,
    normalize: bool = False,
    key: str = "corrections",
    file=None,
) -> CorrectionCurve:
    """Build a :class:`CorrectionCurve` from one ``[[corrections]]`` TOML table.

    Parameters
    ----------
    table : mapping
        Keys as in docs/plant-file.md: ``result``, ``variable``,
        ``reference = {value, unit}``, ``kind``, and ``curve = {x, y, x_unit}``
        (optional ``y_unit`` for additive offsets) or ``polynomial = [c0, c1, ...]``
        in the deviation ``x - reference`` expressed in the reference's unit.
        Optional ``name``.
    convert : callable, optional
        ``convert(values, unit, difference=False) -> SI``; default
        :func:`perftest.units.to_si`.  ``difference=True`` converts intervals
        (scale only, no offset).
    normalize : bool, default False
        Normalise the table to 1 (or 0) at the reference instead of rejecting it.
    key : str
        Key path for messages, e.g. ``"corrections[2]"``.
    file : path, optional
        Plant file, for messages.

    Returns
    -------
    CorrectionCurve  (all values SI)

    Raises
    ------
    PlantFileError
        Naming the key when an entry is missing or malformed.

    Notes
    -----
    Polynomial coefficients are rescaled to SI: with :math:`s` the SI size of one
    unit of the reference (as an interval), :math:`c_k^{SI} = c_k / s^k`.

    Examples
    --------
    >>> t = {"result": "net_power", "variable": "T_amb", "kind": "multiplicative",
    ...      "reference": {"value": 15.0, "unit": "degC"},
    ...      "curve": {"x": [5.0, 15.0, 25.0], "y": [1.02, 1.0, 0.97], "x_unit": "degC"}}
    >>> def conv(v, unit, difference=False):  # degC only, for the example
    ...     return np.asarray(v) + (0.0 if difference else 273.15)
    >>> c = curve_from_table(t, convert=conv)
    >>> c.reference, c.x[0]
    (288.15, 278.15)
    """
    conv = convert or _default_convert()
    if not isinstance(table, Mapping):
        raise PlantFileError(f"Plant file key '{key}' must be a table.", key=key, file=file)
    for req in ("variable", "reference"):
        if req not in table:
            raise PlantFileError(
                f"Plant file key '{key}' needs '{req}'.", key=f"{key}.{req}", file=file
            )
    kind = table.get("kind", "multiplicative")
    ref_value, ref_unit = _value_unit(table["reference"], f"{key}.reference", file)
    try:
        ref = float(np.asarray(_si(conv, float(ref_value), ref_unit), dtype=float))
        common = dict(
            reference=ref,
            kind=kind,
            name=table.get("name"),
            result=table.get("result"),
        )
        if sum(k in table for k in ("curve", "polynomial", "surface")) > 1:
            raise PlantFileError(
                f"Plant file key '{key}': give one of 'curve', 'polynomial' or 'surface'.",
                key=key,
                file=file,
            )
        if "surface" in table:
            return _surface_from_table(table, conv, ref, ref_unit, normalize, key, file)
        if "curve" in table:
            curve = table["curve"]
            if not isinstance(curve, Mapping) or "x" not in curve or "y" not in curve:
                raise PlantFileError(
                    f"Plant file key '{key}.curve' must be a table with 'x' and 'y' lists.",
                    key=f"{key}.curve",
                    file=file,
                )
            x_unit = curve.get("x_unit", ref_unit)
            x = np.asarray(_si(conv, [float(v) for v in curve["x"]], x_unit), dtype=float)
            y = np.asarray([float(v) for v in curve["y"]], dtype=float)
            if curve.get("y_unit") is not None:
                if kind != "additive":
                    raise PlantFileError(
                        f"Plant file key '{key}.curve.y_unit' is only for additive curves; "
                        "multiplicative factors are plain numbers.",
                        key=f"{key}.curve.y_unit",
                        file=file,
                    )
                y = np.asarray(_si(conv, y.tolist(), curve["y_unit"], True), dtype=float)
            if normalize:
                return CorrectionCurve.from_points(table["variable"], x, y, **common)
            return CorrectionCurve(table["variable"], tuple(x), tuple(y), **common)
        if "polynomial" in table:
            coef = [float(v) for v in table["polynomial"]]
            s = 1.0 if ref_unit is None else float(np.asarray(conv(1.0, ref_unit, difference=True)))
            coef = [c / s**i for i, c in enumerate(coef)]
            return CorrectionCurve(table["variable"], polynomial=tuple(coef), **common)
        raise PlantFileError(
            f"Plant file key '{key}' needs 'curve', 'polynomial' or 'surface'.",
            key=key,
            file=file,
        )
    except InputError as exc:
        raise PlantFileError(f"Plant file key '{key}': {exc}", key=key, file=file) from None
    except (TypeError, ValueError) as exc:
        if isinstance(exc, PlantFileError):
            raise
        raise PlantFileError(
            f"Plant file key '{key}': values must be numbers. Got {exc}.", key=key, file=file
        ) from None


def _surface_from_table(table, conv, ref, ref_unit, normalize, key, file) -> CorrectionSurface:
    """``surface = { x, y, values, x_unit, y_unit }`` with ``second_variable`` and
    ``second_reference`` (docs/plant-file.md)."""
    for req in ("second_variable", "second_reference"):
        if req not in table:
            raise PlantFileError(
                f"Plant file key '{key}': a 'surface' needs '{req}' (the variable of its "
                "columns and its reference value).",
                key=f"{key}.{req}",
                file=file,
            )
    surf = table["surface"]
    if not isinstance(surf, Mapping) or not {"x", "y", "values"} <= set(surf):
        raise PlantFileError(
            f"Plant file key '{key}.surface' must be a table with 'x', 'y' and 'values' "
            "(one row of len(y) numbers per x).",
            key=f"{key}.surface",
            file=file,
        )
    ref2_value, ref2_unit = _value_unit(table["second_reference"], f"{key}.second_reference", file)
    ref2 = float(np.asarray(_si(conv, float(ref2_value), ref2_unit), dtype=float))
    x = np.asarray(_si(conv, [float(v) for v in surf["x"]], surf.get("x_unit", ref_unit)))
    y = np.asarray(_si(conv, [float(v) for v in surf["y"]], surf.get("y_unit", ref2_unit)))
    values = [[float(v) for v in row] for row in surf["values"]]
    if surf.get("values_unit") is not None:
        if table.get("kind", "multiplicative") != "additive":
            raise PlantFileError(
                f"Plant file key '{key}.surface.values_unit' is only for additive tables.",
                key=f"{key}.surface.values_unit",
                file=file,
            )
        values = np.asarray(_si(conv, values, surf["values_unit"], True), dtype=float).tolist()
    return CorrectionSurface(
        table["variable"],
        table["second_variable"],
        tuple(np.asarray(x, dtype=float).tolist()),
        tuple(np.asarray(y, dtype=float).tolist()),
        values,
        reference=ref,
        second_reference=ref2,
        kind=table.get("kind", "multiplicative"),
        name=table.get("name"),
        result=table.get("result"),
        normalize=normalize,
    )


def curves_from_plant(plant, *, convert: Converter | None = None) -> list[CorrectionCurve]:
    """All ``[[corrections]]`` of a plant (``Plant`` or its ``sections`` dict), in SI.

    Filter by ``curve.result`` to get the curves of one result.
    """
    entries, file = _entries(plant, "corrections")
    return [
        curve_from_table(t, convert=convert, key=f"corrections[{i}]", file=file)
        for i, t in enumerate(entries)
    ]
