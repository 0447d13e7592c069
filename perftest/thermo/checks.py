"""Array plumbing and the messages and range checks shared by the property modules.

:class:`Args` takes floats, ndarrays or Series, broadcasts them to flat float arrays
and shapes the outputs back (a Series in gives a Series out with the same index).
The message helpers format a state for an error message in one way everywhere.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from perftest.errors import InputError

#: Phases a caller may declare for a (p, T) state.
PHASES = ("liquid", "vapour", "gas", "supercritical", "wet")


# --------------------------------------------------------------------------------------
# array plumbing: scalar / ndarray / Series in, the same kind out
# --------------------------------------------------------------------------------------
class Args:
    """Broadcast inputs to flat float arrays and remember how to shape outputs."""

    def __init__(self, func: str, **named):
        self.index = None
        values = list(named.values())
        first = values[0]
        if type(first) is np.ndarray and first.dtype == np.float64:
            # the usual case inside the library: float arrays of one shape already
            shape = first.shape
            if all(
                type(v) is np.ndarray and v.dtype == np.float64 and v.shape == shape for v in values
            ):
                self.shape = shape
                self.scalar = shape == ()
                self.flat = [np.ascontiguousarray(v).ravel() for v in values]
                return
        arrays = []
        for name, value in named.items():
            if isinstance(value, pd.Series):
                if self.index is None:
                    self.index = value.index
                elif not value.index.equals(self.index):
                    raise InputError(
                        f"The {name!r} parameter of {func} must have the same index as "
                        "the other Series arguments.",
                        parameter=name,
                    )
                value = value.to_numpy(dtype=float)
            if value is None:  # np.asarray(None, float) would be a silent NaN
                raise InputError(
                    f"The {name!r} parameter of {func} must be a number or an array of "
                    "numbers. Got None.",
                    parameter=name,
                )
            try:
                arr = np.asarray(value, dtype=float)
            except (TypeError, ValueError):
                raise InputError(
                    f"The {name!r} parameter of {func} must be a number or an array of "
                    f"numbers. Got {type(value).__name__}.",
                    parameter=name,
                ) from None
            arrays.append(arr)
        try:
            arrays = np.broadcast_arrays(*arrays)
        except ValueError:
            shapes = ", ".join(f"{k}: {np.shape(v)}" for k, v in named.items())
            raise InputError(
                f"The arguments of {func} must have broadcastable shapes. Got {shapes}."
            ) from None
        self.shape = arrays[0].shape
        self.scalar = self.shape == () and self.index is None
        self.flat = [np.ascontiguousarray(a, dtype=float).ravel() for a in arrays]

    def out(self, arr):
        arr = np.asarray(arr, dtype=float).reshape(self.shape)
        if self.index is not None:
            return pd.Series(arr, index=self.index)
        if self.scalar:
            return float(arr)
        return arr


def fmt_state(p, T=None, *, h=None, s=None, x=None) -> str:
    """Describe a state for an error message (MPa, K, kJ/kg)."""
    parts = [f"p = {p / 1e6:.6g} MPa"]
    if T is not None:
        parts.append(f"T = {T:.2f} K")
    if h is not None:
        parts.append(f"h = {h / 1e3:.6g} kJ/kg")
    if s is not None:
        parts.append(f"s = {s / 1e3:.6g} kJ/(kg K)")
    if x is not None:
        parts.append(f"x = {x:.4g}")
    return ", ".join(parts)


def prefix(where) -> str:
    """Start of a message naming the stream (empty when none is given)."""
    return f"{where}: " if where else ""


# --------------------------------------------------------------------------------------
# messages and range checks
# --------------------------------------------------------------------------------------
def more(mask) -> str:
    """Tail of a message counting the other failing states of the same call."""
    n = int(np.count_nonzero(mask))
    return f" ({n - 1} more state(s) in this call have the same problem.)" if n > 1 else ""


def range_hint(fluid) -> str:
    """The validity range of the formulation, for out-of-range messages."""
    if fluid.is_if97:
        return (
            " (valid: 273.15 K <= T <= 1073.15 K at p <= 100 MPa, and 1073.15 K < T <= "
            "2273.15 K at p <= 50 MPa)"
        )
    return ""


def check_phase(phase, where):
    """Refuse a phase name that is not one of :data:`PHASES` (None passes)."""
    if phase is not None and phase not in PHASES:
        raise InputError(
            f"{prefix(where)}phase must be one of {', '.join(PHASES)} or None. Got {phase!r}.",
            parameter="phase",
        )


def check_quality(x, func, where):
    """Refuse a vapour quality outside [0, 1]."""
    bad = (x < 0) | (x > 1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{prefix(where)}the quality 'x' of {func} must lie between 0 and 1. Got {x[i]!r}.",
            parameter="x",
        )


def check_number(value, name, func, lo=-math.inf, hi=math.inf, what="a number"):
    """Return `value` as a float in [lo, hi]; refuse NaN, bools and non-numbers.

    The message reads "The '<name>' parameter of <func> must be <what>. Got <value>."
    """
    try:
        x = float(value)
    except (TypeError, ValueError):
        x = math.nan
    if isinstance(value, bool) or not (lo <= x <= hi):
        raise InputError(
            f"The {name!r} parameter of {func} must be {what}. Got {value!r}.", parameter=name
        )
    return x


def check_fraction(value, name, func, hi=1.0):
    """Return a mole (or mass) fraction in [0, hi] as a float."""
    return check_number(
        value, name, func, 0.0, hi, f"a mole fraction between 0 and {hi:g} (not percent)"
    )
