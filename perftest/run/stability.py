"""Stability of a run: permissible variations and the per-tag steadiness table.

``Run.stability`` calls :func:`stability`; :func:`permissible` is shared with the
steadiest-window search (:mod:`perftest.run.steady`).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd

from perftest.errors import InputError, StabilityWarning
from perftest.plant.file import DEFAULT_STABILITY, StabilityLimit, TagSpec
from perftest.run.common import PERCENT_KINDS, column_list, field, fmt_time
from perftest.run.windows import _seconds, duration_seconds

__all__ = ["stability", "permissible", "permissible_spec"]


def permissible_spec(run, tag: str, limits):
    """Return ``(spec, basis)`` for a tag following the documented priority."""
    quantity = run.quantities.get(tag)
    if limits is not None:
        if tag in limits:
            return limits[tag], "argument (tag)"
        if quantity is not None and quantity in limits:
            return limits[quantity], "argument (quantity)"
    spec = field(field(run.plant, "tags", {}) or {}, tag)
    override = field(spec, "stability")
    if override is not None:
        return override, "plant tag"
    plant_limits = field(run.plant, "stability", {}) or {}
    if quantity is not None and quantity in plant_limits:
        lim = plant_limits[quantity]
        return lim, ("default" if lim == DEFAULT_STABILITY.get(quantity) else "plant quantity")
    if quantity in DEFAULT_STABILITY:
        return DEFAULT_STABILITY[quantity], "default"
    return None, "none"


def permissible(run, tags: list[str], means: np.ndarray, limits):
    """Permissible variation [SI] per tag (NaN where none) and its basis.

    ``means`` may be 1-D (one per tag) or 2-D (windows x tags).
    """
    from perftest.units import to_si

    means = np.asarray(means, dtype=float)
    out = np.full(means.shape, np.nan)
    basis = []
    # StabilityLimit.limit_si, all tags at once: |mean| * value_si for a percent
    # limit, value_si (+ 0 * mean) for the others (positions, value_si)
    percent: tuple = ([], [])
    fixed: tuple = ([], [])
    for j, (tag, (spec, where)) in enumerate(zip(tags, _specs(run, tags, limits), strict=True)):
        basis.append(where)
        if spec is None:
            continue
        col = (..., j)
        if type(spec) is StabilityLimit:  # noqa: E721 (a subclass may compute otherwise)
            part = percent if spec.kind == "percent" else fixed
            part[0].append(j)
            part[1].append(spec.value_si)
            continue
        if hasattr(spec, "limit_si"):  # a plant-file StabilityLimit, already in SI
            out[col] = spec.limit_si(means[col])
            continue
        if isinstance(spec, int | float | np.floating | np.integer):
            value, kind, unit = float(spec), "absolute", None
        else:
            value = field(spec, "value")
            kind = str(field(spec, "kind", "absolute"))
            unit = field(spec, "unit")
            if value is None:
                raise InputError(
                    f"The stability limit of tag '{tag}' ({where}) has no 'value'. Give "
                    "{value, kind} with kind 'percent' or 'absolute'.",
                    parameter="limits",
                    tag=tag,
                )
            value = float(value)
        if not (value > 0 and math.isfinite(value)):
            raise InputError(
                f"The stability limit of tag '{tag}' ({where}) must be a positive number. "
                f"Got {value!r}.",
                parameter="limits",
                tag=tag,
            )
        if kind in PERCENT_KINDS:
            out[col] = value / 100.0 * np.abs(means[col])
        elif kind == "absolute":
            if unit:
                value = float(to_si(value, unit, quantity=run.quantities.get(tag), difference=True))
            out[col] = value
        else:
            raise InputError(
                f"The stability limit of tag '{tag}' ({where}) must have kind 'percent' or "
                f"'absolute'. Got {kind!r}.",
                parameter="limits",
                tag=tag,
            )
    if percent[0]:
        out[..., percent[0]] = np.abs(means[..., percent[0]]) * np.asarray(percent[1], dtype=float)
    if fixed[0]:
        cols = fixed[0]
        out[..., cols] = np.asarray(fixed[1], dtype=float) + 0.0 * means[..., cols]
    return out, basis


def _specs(run, tags, limits) -> list:
    """:func:`permissible_spec` of each tag, the plant's tables looked up once."""
    quantities = run.quantities
    tagspecs = field(run.plant, "tags", {}) or {}
    plant_limits = field(run.plant, "stability", {}) or {}
    # (a dict's get directly: field() asks first whether it is a mapping)
    lookup = tagspecs.get if type(tagspecs) is dict else (lambda tag: field(tagspecs, tag))
    out = []
    for tag in tags:
        quantity = quantities.get(tag)
        if limits is not None:
            if tag in limits:
                out.append((limits[tag], "argument (tag)"))
                continue
            if quantity is not None and quantity in limits:
                out.append((limits[quantity], "argument (quantity)"))
                continue
        spec = lookup(tag)
        override = spec.stability if type(spec) is TagSpec else field(spec, "stability")  # noqa: E721
        if override is not None:
            out.append((override, "plant tag"))
        elif quantity is not None and quantity in plant_limits:
            lim = plant_limits[quantity]
            default = DEFAULT_STABILITY.get(quantity)
            out.append((lim, "default" if lim is default or lim == default else "plant quantity"))
        elif quantity in DEFAULT_STABILITY:
            out.append((DEFAULT_STABILITY[quantity], "default"))
        else:
            out.append((None, "none"))
    return out


def stability(run, limits=None, *, tags=None, warn: bool = True) -> pd.DataFrame:
    """Judge how steady each tag is over the run (or window).

    Parameters
    ----------
    run : Run
        The run (or window) to work on.
    limits : dict, optional
        Permissible variation keyed by tag id or quantity: a number [SI,
        absolute] or ``{"value": v, "kind": "percent" | "absolute", "unit": u}``.
    tags : list of str, optional
        Tags to judge (default all).
    warn : bool, default True
        Issue a :class:`~perftest.errors.StabilityWarning` listing the failing tags.

    Returns
    -------
    DataFrame
        Indexed by tag: ``quantity, n, mean, std, min, max, max_deviation,
        drift, permissible, ratio, passed, basis`` (SI).  ``passed`` is
        ``<NA>`` when no permissible variation is known for the tag.

    Notes
    -----
    ``max_deviation`` is the largest :math:`|x_i - \\bar x|`; ``drift`` is the
    least-squares slope times the window length :math:`t_{last} - t_{first}`;

    .. math:: r = \\max(\\text{max\\_deviation}, |\\text{drift}|) / \\text{permissible}

    and a tag passes when :math:`r \\le 1`.  The permissible variation is taken
    from, in order: ``limits[tag]``, ``limits[quantity]``, the tag's
    ``stability`` in the plant file, the plant's ``[stability.<quantity>]``,
    :data:`DEFAULT_STABILITY` (common practice, no source).  Percent limits
    are a percentage of the window mean.
    """
    tags = run._check_tags(tags, "stability")
    a = judge(run, tags, limits)
    table = pd.DataFrame(
        {
            "quantity": [run.quantities.get(tg, "") for tg in tags],
            "n": a["n"],
            "mean": a["mean"],
            "std": a["std"],
            "min": a["min"],
            "max": a["max"],
            "max_deviation": a["max_deviation"],
            "drift": a["drift"],
            "permissible": a["permissible"],
            "ratio": a["ratio"],
            "passed": a["passed"],
            "basis": a["basis"],
        },
        index=pd.Index(tags, name="tag"),
    )
    failing = table.index[table["passed"].fillna(True).to_numpy() == False].tolist()  # noqa: E712
    if warn and failing:
        worst = table.loc[failing, "ratio"].sort_values(ascending=False)
        shown = ", ".join(f"{tg} ({r:.2f})" for tg, r in worst.items())
        warnings.warn(
            f"{len(failing)} tag(s) vary more than permitted in the window "
            f"{fmt_time(run.data.index[0])} to {fmt_time(run.data.index[-1])} "
            f"(ratio to the permissible variation): {shown}.",
            StabilityWarning,
            stacklevel=3,
        )
    return table


def judge(run, tags: list[str], limits=None) -> dict:
    """The columns of :func:`stability`'s table as arrays, in the order of ``tags``.

    ``tags`` must be tags of the run (checked by the caller).  The table's columns
    are computed here, so that a loop over many windows that needs only a few of
    them (``ratio``, ``passed``) builds no table.
    """
    if column_list(run.data.columns) == list(tags):
        x = run.data.to_numpy(dtype=float)  # every tag in order: no column selection
    else:
        x = run.data[tags].to_numpy(dtype=float)
    valid = np.isfinite(x)
    n = valid.sum(axis=0)
    t = _seconds(run.data.index)[:, None] * np.ones((1, len(tags)))
    if len(x) and min(x.strides, default=0) >= 0 and valid.all():
        # every sample valid: the nan-aware statistics' arithmetic without their
        # masking steps (the same sums in the same order, so the same digits)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = x.sum(axis=0) / n
            dev = x - mean
            std = np.sqrt((dev * dev).sum(axis=0) / (n - 1))
            lo = np.fmin.reduce(x, axis=0)  # as nanmin and nanmax do
            hi = np.fmax.reduce(x, axis=0)
            maxdev = np.maximum(hi - mean, mean - lo)
            tv = np.where(valid, t, np.nan)
            tm = tv.sum(axis=0) / n
            sxx = ((tv - tm) ** 2).sum(axis=0)
            sxy = ((tv - tm) * (x - mean)).sum(axis=0)
            slope = np.where(sxx > 0, sxy / sxx, 0.0)
    else:
        with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
            warnings.simplefilter("ignore", RuntimeWarning)
            mean = np.nanmean(x, axis=0)
            std = np.nanstd(x, axis=0, ddof=1)
            lo = np.nanmin(x, axis=0)
            hi = np.nanmax(x, axis=0)
            maxdev = np.maximum(hi - mean, mean - lo)
            tv = np.where(valid, t, np.nan)
            tm = np.nanmean(tv, axis=0)
            sxx = np.nansum((tv - tm) ** 2, axis=0)
            sxy = np.nansum((tv - tm) * (x - mean), axis=0)
            slope = np.where(sxx > 0, sxy / sxx, 0.0)
    drift = slope * duration_seconds(run)
    drift = np.where(n >= 2, drift, np.nan)
    perm, basis = permissible(run, tags, mean, limits)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.maximum(maxdev, np.abs(drift)) / perm
    known = np.isfinite(ratio)
    with np.errstate(invalid="ignore"):
        passed = pd.arrays.BooleanArray(known & (ratio <= 1.0), ~known)
    return {
        "n": n,
        "mean": mean,
        "std": std,
        "min": lo,
        "max": hi,
        "max_deviation": maxdev,
        "drift": drift,
        "permissible": perm,
        "ratio": ratio,
        "passed": passed,
        "basis": basis,
    }
