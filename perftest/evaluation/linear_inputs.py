"""Inputs of the linear propagation of :func:`~perftest.evaluation.results.evaluate`.

* :func:`input_dof` / :func:`input_dofs`: degrees of freedom of each input (a
  measured tag's averaged dof; exact for fixed values and the stated heating value);
* :func:`results_at_points`: the model at the estimate and at the points of the
  central differences of :func:`~perftest.evaluation.propagation.propagate`, from one
  vectorised call.
"""

from __future__ import annotations

import math

import numpy as np

from perftest.evaluation.budgets import DEFAULT_REL_STEP
from perftest.evaluation.propagation import _difference_points, _steps

__all__ = ["input_dof", "input_dofs", "results_at_points"]


def results_at_points(model, x: np.ndarray, cov: np.ndarray, m: int) -> list:
    """``[(x, y(x)), (P, y(P))]``: the model at ``x`` and at the central-difference
    points ``P`` of :func:`~perftest.evaluation.propagation.propagate` (its default
    step), from one call; ``[]`` where the call raises or sets a floating-point
    flag, or returns another shape."""
    h = _steps(x, np.sqrt(np.diag(0.5 * (cov + cov.T))), DEFAULT_REL_STEP)
    points = _difference_points(x, h)
    try:
        with np.errstate(all="raise"):
            y = model(np.concatenate([x[:, None], points], axis=1))
    except Exception:  # noqa: BLE001 - computed again, one point at a time, in place
        return []
    if not (isinstance(y, np.ndarray) and y.shape == (m, points.shape[1] + 1)):
        return []
    return [(x.copy(), y[:, 0].copy()), (points, y[:, 1:].copy())]


def input_dofs(rec, names) -> np.ndarray:
    """:func:`input_dof` of each name, as an array (the tables read once)."""
    meas = getattr(rec, "measurements", None)
    tags = tuple(getattr(meas, "tags", ()))
    if not tags:
        return np.full(len(names), math.inf)
    dof = np.asarray(meas.dof, dtype=float)
    first: dict = {}
    for i, t in enumerate(tags):
        first.setdefault(t, i)
    model = getattr(rec, "model", None)
    sources = getattr(model, "sources", {}) if model is not None else {}
    low = None
    out = np.empty(len(names))
    for j, name in enumerate(names):
        if name in first:
            d = float(dof[first[name]])
            out[j] = d if d > 0 else math.inf
            continue
        src = sources.get(name)
        kind = getattr(src, "kind", None)
        if kind == "fixed":
            out[j] = math.inf
        elif kind == "measured" and getattr(src, "tag", None) in first:
            d = float(dof[first[src.tag]])
            out[j] = d if d > 0 else math.inf
        elif name.startswith("fuel."):
            out[j] = math.inf
        else:
            if low is None:
                finite = dof[np.isfinite(dof) & (dof > 0)]
                low = float(finite.min()) if finite.size else math.inf
            out[j] = low
    return out


def input_dof(rec, name: str) -> float:
    """Degrees of freedom of an input of the propagation.

    A measured tag, or a model variable a tag measures, carries its averaged
    measurement's dof.  A fixed value counts as exact (infinite).  An unmeasured or
    derived variable (a unit's heat, a stream's entropy) is a combination of the
    measurements; it gets the smallest dof among them, a lower bound: the
    Welch-Satterthwaite formula never gives fewer than the smallest dof of its
    inputs (GUM G.4.1), so the coverage factor errs on the safe side.
    """
    meas = getattr(rec, "measurements", None)
    tags = tuple(getattr(meas, "tags", ()))
    if not tags:
        return math.inf
    dof = np.asarray(meas.dof, dtype=float)
    if name in tags:
        d = float(dof[tags.index(name)])
        return d if d > 0 else math.inf
    model = getattr(rec, "model", None)
    sources = getattr(model, "sources", {}) if model is not None else {}
    src = sources.get(name)
    kind = getattr(src, "kind", None)
    if kind == "fixed":
        return math.inf
    if kind == "measured" and getattr(src, "tag", None) in tags:
        d = float(dof[tags.index(src.tag)])
        return d if d > 0 else math.inf
    if name.startswith("fuel."):
        return math.inf  # the stated heating-value uncertainty (type B)
    finite = dof[np.isfinite(dof) & (dof > 0)]
    return float(finite.min()) if finite.size else math.inf
