"""Serial elimination over a plant model: tags dropped, ties taken out together.

The plant-level counterpart of :mod:`perftest.balance.elimination`: the candidates
are tags of the model, a dropped tag's model variables become unmeasured again, and
each step starts from the previous solution.  Tags the measurement test cannot tell
apart (:func:`perftest.balance.ambiguity.indistinguishable`) are taken out together;
each single choice among them is reconciled as an alternative, so that the results
that depend on the choice can be shown with their spread.  Tags the plant file
marks ``trusted = true`` (or the caller names) are never dropped.

Layer: below :mod:`perftest.balance.plant`, which passes in its solve function.
"""

from __future__ import annotations

import threading
import tomllib
import warnings
import weakref
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perftest.balance.ambiguity import indistinguishable
from perftest.balance.result import CHOICE_RTOL
from perftest.errors import InputError, ReconciliationWarning
from perftest.plant.guess import initial_guess

__all__ = ["EliminatedTag", "TagAlternative", "choice_table", "eliminate", "trusted_tags"]


@dataclass(frozen=True)
class EliminatedTag:
    """One step of serial elimination: the tag dropped and the test that dropped it.

    Attributes
    ----------
    tag : str
        Tag or group id moved to the unmeasured variables (the largest statistic).
    z : float
        Its measurement-test statistic before it was dropped.
    chi2, dof, p_value : float, int, float
        Global test before it was dropped.
    tied_with : tuple of str
        Tags the measurement test cannot tell from ``tag``: equal statistics (they
        sit in the same balances in the same way) or statistics within their
        sampling spread (see :mod:`perftest.balance.ambiguity`).  Any of them may be
        the faulty one; :meth:`PlantReconciliation.choice_spread` shows what each
        single choice would give.
    redundancy_lost : int
        Degrees of freedom the step took out.
    shared : bool
        True at a step that met such a set: then no tag was dropped (``tag`` and
        ``tied_with`` keep their readings) and the redundancy they share was taken
        out instead (see :func:`eliminate`).
    """

    tag: str
    z: float
    chi2: float
    dof: int
    p_value: float
    tied_with: tuple = ()
    redundancy_lost: int = 0
    shared: bool = False


@dataclass(frozen=True, eq=False)
class TagAlternative:
    """One single choice at a step whose candidate tags could not be told apart.

    Attributes
    ----------
    step : int
        Index into the steps of the step it is an alternative to.
    tag : str
        The one tag this alternative drops at that step.
    model : PlantModel
        The model bound without it (and without the tags of earlier steps).
    result : Reconciliation
        The reconciliation with that choice.
    solver_tags : tuple of str
        Tags in ``result.x``.
    record : EliminatedTag
        The step as this choice would have recorded it.
    """

    step: int
    tag: str
    model: object
    result: object
    solver_tags: tuple
    record: EliminatedTag


def trusted_tags(plant, trusted=None) -> tuple:
    """Tags never to drop: those named in ``trusted`` and those the plant file marks.

    Parameters
    ----------
    plant : Plant
    trusted : iterable of str, optional
        Tag or group ids.

    Returns
    -------
    tuple of str

    Raises
    ------
    InputError
        A name that is not a tag or group of the plant; a ``trusted`` key in the plant
        file that is not ``true`` or ``false`` (names tag, key and line).

    Notes
    -----
    The key is read from a tag's validated record when it carries one, and else from
    the tag's raw table in the plant file's text, so that ``trusted = true`` works
    with any loader that accepts the key.
    """
    known = set(getattr(plant, "tags", {})) | set(getattr(plant, "groups", {}) or {})
    out = []
    for t in trusted or ():
        if not isinstance(t, str) or t not in known:
            raise InputError(
                f"The 'trusted' parameter of reconcile must hold tag or group ids of plant "
                f"'{getattr(plant, 'name', '?')}'. Got {t!r}.",
                parameter="trusted",
            )
        out.append(t)
    raw_tags = {}
    text = getattr(plant, "text", None)
    if isinstance(text, str) and "trusted" in text:
        try:
            raw_tags = tomllib.loads(text).get("tags", {})
        except tomllib.TOMLDecodeError:  # pragma: no cover - the loader parsed it
            raw_tags = {}
    for tid, spec in getattr(plant, "tags", {}).items():
        flag = getattr(spec, "trusted", None)
        if flag is None and isinstance(raw_tags.get(tid), dict):
            flag = raw_tags[tid].get("trusted")
        if flag is None:
            continue
        if not isinstance(flag, bool):
            locate = getattr(plant, "locate", None)
            line = locate("tags", tid, "trusted") if callable(locate) else None
            where = f" (line {line})" if line else ""
            raise InputError(
                f"The 'trusted' key of tag '{tid}' in {getattr(plant, 'path', 'the plant file')}"
                f"{where} must be true or false. Got {flag!r}.",
                tag=tid,
            )
        if flag:
            out.append(tid)
    return tuple(dict.fromkeys(out))


def _start(model, previous, measurements):
    """Unmeasured start values of ``model`` from the previous solution's slots."""
    y = previous[model._ys]
    if not np.all(np.isfinite(y)):
        # a variable the previous step left unobservable (nan) starts from the usual
        # initial guess
        values = np.asarray(measurements.value, dtype=float)
        x = values[[measurements.index(t) for t in model.measured]]
        y = np.where(np.isfinite(y), y, initial_guess(model, x))
    return y


# bind() results per model and tag set: a trend reconciles window after window with
# the same tags, and binding builds the model's index arrays again each time.  A
# bound model is never changed after binding (its property cache only keeps exact
# repeats), so windows may share it.  Weak keys: the cache goes with its model.
_BOUND: weakref.WeakKeyDictionary = weakref.WeakKeyDictionary()
_BOUND_LOCK = threading.Lock()
_BOUND_PER_MODEL = 64  # tag sets kept per model (elimination makes a few per window)


def bound(model, measured):
    """``model.bind(measured)``, reused for a model and tag set bound before."""
    key = tuple(measured)
    with _BOUND_LOCK:
        per = _BOUND.get(model)
        if per is None:
            per = _BOUND[model] = {}
        out = per.get(key)
    if out is not None and out.combustion is model.combustion:
        return out
    out = model.bind(key)
    with _BOUND_LOCK:
        if len(per) >= _BOUND_PER_MODEL:
            per.pop(next(iter(per)))
        per[key] = out
    return out


def eliminate(model, result, tags, measurements, alpha, trusted, solve):
    """Serial elimination, the rule of :func:`perftest.balance.serial_elimination`.

    Parameters
    ----------
    model : PlantModel
        Bound to the measured tags of ``result``.
    result, tags
        The starting reconciliation and the tags of its ``x``.
    measurements : Measurements
    alpha : float
    trusted : tuple of str
        Tags never to drop.
    solve : callable
        ``solve(model, y0, shared) -> (result, tags)``; ``shared`` a list of
        directions, each a mapping tag -> weight [SI] (see Notes).

    Returns
    -------
    tuple
        ``(model, result, tags, steps, alternatives)``.

    Notes
    -----
    A tag whose statistic stands clear of the others is dropped (its model
    variables become unmeasured).  A set of tags the test cannot tell apart keeps
    its readings: the direction their gross-error signatures share is freed, the
    readings taken as :math:`x = x_t + d\\, b` with :math:`d_i` each tag's standard
    uncertainty in the sense of its adjustment and ``b`` unmeasured.  That takes out
    the redundancy they share (the step's ``redundancy_lost``) and no more; the
    balances stay closed in the true values :math:`x_t`, while the reported values
    of the set are its readings, so :meth:`PlantReconciliation.closure` shows the
    imbalance the set leaves.
    """
    steps: list[EliminatedTag] = []
    alternatives: list[TagAlternative] = []
    shared: list[dict] = []
    trusted = set(trusted)
    while result.p_value < alpha and result.dof > 0:
        nx = model.n_x
        eligible = np.zeros(result.x.size, dtype=bool)
        eligible[:nx] = np.asarray(result.redundant[:nx], dtype=bool) & np.array(
            [t not in trusted for t in model.measured], dtype=bool
        )
        eligible &= np.isfinite(result.z)
        z = np.where(eligible, result.z, -np.inf)
        if not np.isfinite(z.max(initial=-np.inf)):
            break
        j = int(np.argmax(z))
        positions = indistinguishable(result, j, eligible, alpha)
        group = [model.measured[g] for g in positions]
        previous = model.slot_values(result.x[:nx], result.y)
        before = result
        if len(group) == 1:
            model = bound(model, [t for t in model.measured if t != group[0]])
            result, tags = _quiet(solve, model, _start(model, previous, measurements), shared)
            steps.append(
                EliminatedTag(
                    group[0],
                    float(before.z[j]),
                    float(before.chi2),
                    int(before.dof),
                    float(before.p_value),
                    (),
                    int(before.dof - result.dof),
                )
            )
            continue
        for g, tag in zip(positions, group, strict=True):
            alt_model = bound(model, [t for t in model.measured if t != tag])
            alt, alt_tags = _quiet(
                solve, alt_model, _start(alt_model, previous, measurements), shared
            )
            record = EliminatedTag(
                tag, float(before.z[g]), float(before.chi2), int(before.dof), float(before.p_value)
            )
            alternatives.append(
                TagAlternative(len(steps), tag, alt_model, alt, tuple(alt_tags), record)
            )
        adj = np.asarray(before.adjustments, dtype=float)
        u = np.asarray(before.u_measured, dtype=float)
        direction = {
            t: float(-np.sign(adj[g]) * u[g]) for g, t in zip(positions, group, strict=True)
        }
        result, tags = _quiet(
            solve, model, _start(model, previous, measurements), [*shared, direction]
        )
        if result.dof >= before.dof:  # pragma: no cover - the direction was free already
            result, tags = before, tags
            break
        shared.append(direction)
        steps.append(
            EliminatedTag(
                group[0],
                float(before.z[j]),
                float(before.chi2),
                int(before.dof),
                float(before.p_value),
                tuple(group[1:]),
                int(before.dof - result.dof),
                shared=True,
            )
        )
    return model, result, tags, steps, alternatives


def _quiet(solve, model, y0, shared):
    with warnings.catch_warnings():
        # dof reaching 0 is an expected end of elimination, not news
        warnings.simplefilter("ignore", ReconciliationWarning)
        return solve(model, y0, list(shared))


def choice_table(rec, names=None):
    """The table of :meth:`PlantReconciliation.choice_spread` for ``rec``."""
    if names is None:
        names = [*rec.model.spec.tag_ids, *rec.model.variables]
    names = list(dict.fromkeys(names))
    table = pd.DataFrame(
        {"value": [rec.value(n) for n in names], "u": [rec.uncertainty(n) for n in names]},
        index=pd.Index(names, name="name"),
    )
    if not rec.alternatives:
        table["low"] = table["high"] = table["value"]
        table["spread"] = 0.0
        table["depends_on_choice"] = False
        return table
    vals, us = [], []
    for alt in rec.alternatives:
        col = f"without {alt.eliminated[-1].tag}"
        table[col] = [alt.value(n) for n in names]
        vals.append(table[col].to_numpy())
        us.append([alt.uncertainty(n) for n in names])
    V = np.array(vals)
    undetermined = np.isnan(V).any(axis=0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-nan columns
        table["low"] = np.nanmin(V, axis=0)
        table["high"] = np.nanmax(V, axis=0)
        u_big = np.nanmax(np.array(us, dtype=float), axis=0)
    table["spread"] = np.where(undetermined, np.nan, table["high"] - table["low"])
    with np.errstate(invalid="ignore"):
        table["depends_on_choice"] = undetermined | (
            table["spread"].to_numpy() > CHOICE_RTOL * u_big
        )
    return table
