"""A test of several repeated runs, or of several load points, in one result.

:func:`evaluate_test` windows, screens, averages, reconciles and evaluates (with
corrections and guarantees) each run or load point on its own, then combines them
with the covariance between windows (:mod:`perftest.evaluation.joint`): the
instruments' systematic errors are shared by every window, their scatter is not.

* Repeated runs of one condition: the test result is the mean of the runs; each
  headline result gets a repeatability check; guarantees are judged on the mean.
* Load points: results, corrections and guarantee verdicts per point, and, when
  the points carry weights, a weighted part-load figure per headline result
  (``weighted_cop``, ...) with its uncertainty from the joint covariance.
"""

from __future__ import annotations

import copy
import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest import defaults
from perftest.errors import InputError, PerftestError
from perftest.evaluation.guarantees import VERDICT_COLUMNS
from perftest.evaluation.joint import (
    HEADLINE_RESULTS,
    VarianceSplit,
    combine,
    joint_covariance,
    repeatability,
    variance_split,
)

__all__ = ["Campaign", "WindowResult", "evaluate_test", "plant_windows"]


@dataclass(frozen=True, eq=False)
class WindowResult:
    """One run or load point of a test, evaluated on its own.

    Attributes
    ----------
    label : str
        ``"run 1"``, ... or the load point's label.
    start, end : pandas.Timestamp
        The window as stated.
    window_run : perftest.run.Run
        The window after the outlier screen.
    measurements : perftest.run.Measurements
    reconciliation : perftest.balance.plant.PlantReconciliation
    performance : perftest.evaluation.results.Performance
        Results, corrections and guarantee verdicts of this window alone.
    split : VarianceSplit
        Random and systematic parts of each result.
    weight : float or None
        Weight of a load point in the part-load figure.
    """

    label: str
    start: pd.Timestamp
    end: pd.Timestamp
    window_run: object
    measurements: object
    reconciliation: object
    performance: object
    split: VarianceSplit
    weight: float | None = None

    def results(self) -> pd.DataFrame:
        """``value, u, U95, unit, u_random, u_systematic`` per result [SI]."""
        r = self.performance.results[["value", "u", "U95", "unit"]].copy()
        r["u_random"] = self.split.u_random.reindex(r.index)
        r["u_systematic"] = self.split.u_systematic.reindex(r.index)
        return r


@dataclass(frozen=True, eq=False)
class Campaign:
    """Outcome of :func:`evaluate_test`: a test of several runs or load points.

    Attributes
    ----------
    mode : str
        ``"runs"`` (repeated runs of one condition) or ``"points"`` (load points).
    windows : tuple of WindowResult
        The runs or points in the order given.
    results : pandas.DataFrame
        Runs: the combined test result (mean of the runs); points: the weighted
        part-load figures (``weighted_<result>``; empty without weights).  Columns
        ``value, u, U95, unit, k, dof, description`` [SI].
    cov : pandas.DataFrame
        Covariance of ``results`` [SI squared].
    joint : pandas.DataFrame
        Covariance of every result of every window (index ``(label, result)``).
    repeatability : pandas.DataFrame
        Runs: :func:`perftest.evaluation.joint.repeatability` of the headline
        results; empty for points.
    guarantees : pandas.DataFrame
        Runs: verdicts on the combined result; points: every point's verdicts with
        a ``point`` column.
    level : float
        Coverage probability of ``U95``.
    notes : tuple of str
    """

    mode: str
    windows: tuple
    results: pd.DataFrame
    cov: pd.DataFrame
    joint: pd.DataFrame
    repeatability: pd.DataFrame
    guarantees: pd.DataFrame
    level: float = 0.95
    notes: tuple = field(default=())

    @property
    def labels(self) -> list:
        return [w.label for w in self.windows]

    def table(self, name: str) -> pd.DataFrame:
        """One result across the windows: ``value, u, U95, u_random, u_systematic``."""
        rows = {}
        for w in self.windows:
            if name in w.performance.results.index:
                rows[w.label] = w.results().loc[name]
        if self.mode == "runs" and name in self.results.index:
            rows["combined"] = self.results.loc[name]
        cols = ["value", "u", "U95", "u_random", "u_systematic", "unit"]
        return pd.DataFrame(rows).T.reindex(columns=cols)

    def __repr__(self) -> str:
        from perftest.display.views import campaign_text

        return campaign_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import campaign_html

        return campaign_html(self)


def _window_list(runs, points, plant) -> tuple[str, list]:
    """(mode, [dict(label, start, end, reference, guarantees, weight)]).

    Entries from the plant file raise :class:`PlantFileError` at their key (file,
    line); entries given as arguments raise :class:`InputError`.
    """
    if runs is not None and points is not None:
        raise InputError(
            "The 'runs' and 'points' parameters of evaluate_test cannot both be given: a "
            "test is either repeated runs of one condition or a set of load points.",
            parameter="runs",
        )
    from_plant = runs is None and points is None
    if from_plant:
        sections = getattr(plant, "sections", {}) or {}
        runs, points = sections.get("runs") or None, sections.get("points") or None
        if runs and points:
            raise _plant(plant, "A plant file may list [[runs]] or [[points]], not both.",
                         "points")  # fmt: skip
        if not runs and not points:
            raise InputError(
                "evaluate_test needs 'runs' or 'points' (or [[runs]] / [[points]] in the "
                "plant file). Got neither.",
                parameter="runs",
            )
    mode = "runs" if runs is not None else "points"
    items = runs if runs is not None else points
    where = f"[[{mode}]]" if from_plant else f"the '{mode}' parameter of evaluate_test"
    shape = "(start, end)" if mode == "runs" else "(label, start, end)"

    def fail(message, *keys):
        if from_plant:
            return _plant(plant, message, mode, *keys)
        return InputError(message, parameter=mode)

    if isinstance(items, str | bytes) or not isinstance(items, Sequence) or not items:
        raise fail(f"{where[0].upper()}{where[1:]} must be a non-empty list of {shape} entries. "
                   f"Got {items!r}.")  # fmt: skip
    out = []
    for i, item in enumerate(items):
        if isinstance(item, Mapping):
            entry = dict(item)
        elif mode == "runs" and isinstance(item, Sequence) and len(item) in (2, 3):
            entry = dict(start=item[0], end=item[1])
            if len(item) == 3:
                entry["label"] = item[2]
        elif mode == "points" and isinstance(item, Sequence) and len(item) == 3:
            entry = dict(label=item[0], start=item[1], end=item[2])
        else:
            raise fail(f"Entry {i + 1} of {where} must be {shape} or a mapping with those "
                       f"keys. Got {item!r}.", i)  # fmt: skip
        for key in ("start", "end"):
            value = entry.get(key)
            if value is None or (isinstance(value, str) and not value.strip()):
                raise fail(f"Entry {i + 1} of {where} needs a '{key}' time. Got {item!r}.",
                           i, key)  # fmt: skip
        if mode == "points" and not str(entry.get("label") or "").strip():
            raise fail(f"Load point {i + 1} of {where} needs a 'label'. Got {item!r}.",
                       i, "label")  # fmt: skip
        entry.setdefault("label", f"run {i + 1}")
        entry["label"] = str(entry["label"])
        entry["index"] = i
        out.append(entry)
    labels = [e["label"] for e in out]
    dup = sorted({x for x in labels if labels.count(x) > 1})
    if dup:
        raise fail(f"The labels of {where} must differ. Got {', '.join(dup)} more than once.",
                   labels.index(dup[0]), "label")  # fmt: skip
    if mode == "runs" and len(out) < 2:
        raise fail(
            f"A test of repeated runs needs at least two runs (for a single window, evaluate "
            f"that window). Got {len(out)} in {where}."
        )
    _refuse_overlaps(out, plant, where, fail)
    weights = [e.get("weight") for e in out]
    if any(w is not None for w in weights) and any(w is None for w in weights):
        missing = weights.index(None)
        raise fail(f"Either every load point of {where} carries a weight or none does. Got "
                   f"weights {weights}.", missing, "weight")  # fmt: skip
    for i, w in enumerate(weights):
        ok = isinstance(w, int | float) and not isinstance(w, bool) and math.isfinite(w)
        if w is not None and not (ok and w >= 0):
            raise fail(f"A load point's weight must be a finite number >= 0. Got {w!r}.",
                       i, "weight")  # fmt: skip
    if all(w is not None for w in weights) and weights and not sum(weights) > 0:
        raise fail(f"The weights of the load points of {where} sum to zero.", 0, "weight")
    for e in out:
        e["from_plant"] = from_plant
    return mode, out


def _refuse_overlaps(entries, plant, where, fail) -> None:
    """Refuse windows that share samples: the same samples in two runs would be
    counted as independent random parts (too small a u of the mean), and two load
    points on one stretch of the log are one point."""
    zone = getattr(getattr(plant, "site", None), "timezone", None) or "UTC"
    spans = []
    for i, e in enumerate(entries):
        try:
            a, b = (pd.Timestamp(e[k]) for k in ("start", "end"))
        except (TypeError, ValueError):
            return  # not a time: Run.window names the parameter later
        a, b = (s.tz_localize(zone) if s.tz is None else s for s in (a, b))
        if not a < b:
            raise fail(f"Entry {i + 1} of {where} ends before it starts ({e['start']} to "
                       f"{e['end']}).", i, "end")  # fmt: skip
        spans.append((a, b, i))
    spans.sort()
    for (_a0, b0, i0), (a1, _b1, i1) in zip(spans, spans[1:], strict=False):
        if a1 < b0:
            raise fail(
                f"Entries {min(i0, i1) + 1} and {max(i0, i1) + 1} of {where} overlap "
                f"({entries[i0]['start']} to {entries[i0]['end']} and {entries[i1]['start']} "
                f"to {entries[i1]['end']}): windows of one test must not share samples.",
                max(i0, i1), "start",
            )  # fmt: skip


def plant_windows(plant) -> tuple[str | None, list]:
    """The ``[[runs]]`` or ``[[points]]`` of a plant file: ``(mode, entries)``.

    ``(None, [])`` when the file lists neither.
    """
    sections = getattr(plant, "sections", {}) or {}
    if not sections.get("runs") and not sections.get("points"):
        return None, []
    return _window_list(None, None, plant)


def _plant(plant, message, *keys):
    err = getattr(plant, "error", None)
    if callable(err):
        return err(message, *keys)
    from perftest.errors import PlantFileError

    return PlantFileError(message, key=".".join(map(str, keys)))


def _point_plant(plant, entry: dict, index: int):
    """The plant with the point's reference conditions and guarantees."""
    ref = entry.get("reference")
    gts = entry.get("guarantees")
    if not ref and gts is None:
        return plant
    sections = copy.deepcopy(dict(plant.sections))
    if ref:
        if not isinstance(ref, Mapping):
            raise _plant(plant, "[[points]] reference must be a table of correction "
                         f"variable = {{ value, unit }}. Got {ref!r}.", "points", index,
                         "reference")  # fmt: skip
        corrections = sections.get("corrections") or []
        variables = {c.get("variable") for c in corrections if isinstance(c, Mapping)}
        for var, value in ref.items():
            if var not in variables:
                raise _plant(
                    plant,
                    f"[[points]] '{entry['label']}': reference {var!r} is not the variable of "
                    f"any [[corrections]] entry ({', '.join(sorted(map(str, variables)))}).",
                    "points", index, "reference", var,
                )  # fmt: skip
            for ci, c in enumerate(corrections):
                if c.get("second_variable") == var or (
                    c.get("variable") == var and "curve" not in c
                ):
                    raise _plant(
                        plant,
                        f"[[points]] '{entry['label']}': a point's reference can move only a "
                        f"correction given as a 1-D 'curve'; [[corrections]] entry {ci + 1} "
                        f"for {var!r} is a polynomial or a surface. State the curve as "
                        "points, or make a plant file per reference condition.",
                        "points", index, "reference", var,
                    )  # fmt: skip
                if c.get("variable") == var:
                    _move_reference(plant, c, value, (index, var))
    if gts is not None:
        sections["guarantees"] = list(gts)
    return dataclasses.replace(plant, sections=sections)


def _mode_of(plant) -> str:
    return "runs" if (getattr(plant, "sections", {}) or {}).get("runs") else "points"


def _move_reference(plant, table: dict, value, where) -> None:
    """Move a curve's reference to ``value``, renormalising it there.

    A multiplicative curve is divided by its value at the new reference and an
    additive one shifted by it, so that the curve is 1 (or 0) there, as the
    corrections require; the correction of a result from the point's condition to
    the new reference is then the ratio (or difference) of the original curve.
    """
    from perftest.units import to_si

    def si(v, unit, difference=False):
        return (
            np.asarray(v, dtype=float)
            if unit is None
            else np.asarray(
                to_si(np.asarray(v, dtype=float), unit, difference=difference), dtype=float
            )
        )

    old = table["reference"]
    old_unit = old.get("unit") if isinstance(old, Mapping) else None
    new_v, new_unit = (value.get("value"), value.get("unit")) if isinstance(
        value, Mapping) else (value, old_unit)  # fmt: skip
    try:
        ref = float(si(float(new_v), new_unit if new_unit is not None else old_unit))
        curve = dict(table["curve"])
        x = si([float(v) for v in curve["x"]], curve.get("x_unit", old_unit))
        y = np.asarray([float(v) for v in curve["y"]], dtype=float)
    except (TypeError, ValueError, KeyError) as exc:
        raise _plant(plant, f"[[points]] reference {where[1]!r}: {exc}", "points",
                     *where) from None  # fmt: skip
    if not (x.min() <= ref <= x.max()):
        raise _plant(
            plant,
            f"[[points]] reference {where[1]!r} = {new_v} lies outside the correction "
            f"curve ({curve['x'][0]} to {curve['x'][-1]}); the curve is not extrapolated.",
            "points", *where,
        )  # fmt: skip
    at = float(np.interp(ref, x, y))
    if table.get("kind", "multiplicative") == "additive":
        curve["y"] = [float(v - at) for v in y]
    else:
        curve["y"] = [float(v / at) for v in y]
    table["curve"] = curve
    table["reference"] = value


def _evaluate_window(plant, run, entry, *, eliminate, outlier_alpha, level, monte_carlo, seed):
    from perftest.balance.plant import reconcile
    from perftest.evaluation.results import evaluate

    try:
        chosen = run.window(entry["start"], entry["end"])
    except PerftestError as exc:
        if not entry.get("from_plant"):
            raise
        raise _plant(plant, " ".join(str(exc).split()), _mode_of(plant), entry["index"],
                     "start") from None  # fmt: skip
    screened = chosen.screen_outliers(alpha=outlier_alpha)
    m = screened.average()
    rec = reconcile(plant, m, eliminate=eliminate)
    perf = evaluate(plant, rec, level=level, monte_carlo=monte_carlo, seed=seed)
    split = variance_split(perf, rec)
    return screened, m, rec, perf, split


def _headline(names) -> list:
    out = []
    for base in HEADLINE_RESULTS:
        for n in (f"corrected_{base}", base):
            if n in names and n not in out:
                out.append(n)
    return out


def evaluate_test(
    plant,
    run,
    *,
    runs=None,
    points=None,
    eliminate: bool = defaults.ELIMINATE,
    outlier_alpha: float = defaults.OUTLIER_ALPHA,
    level: float = 0.95,
    monte_carlo: bool = False,
    seed: int = 20_260_514,
) -> Campaign:
    """Evaluate a test of repeated runs or of load points, with their joint covariance.

    Parameters
    ----------
    plant : perftest.plant.Plant
    run : perftest.run.Run
        The whole test's log.
    runs : sequence of (start, end) or (start, end, label), optional
        Repeated runs of one condition (at least two).
    points : sequence of (label, start, end), optional
        Load points; a mapping entry may also give ``reference`` (correction
        variable -> ``{value, unit}``, overriding the ``[[corrections]]`` reference
        for that point), ``guarantees`` (a list as in ``[[guarantees]]``) and
        ``weight``.  The plant's ``[[guarantees]]`` are judged at the first point
        (the rated point) unless it lists its own; the other points are judged
        against the guarantees they list only.
    eliminate : bool
        Serial elimination of suspect instruments, per window.
    outlier_alpha : float
        Significance level of the outlier screen.
    level : float
        Coverage probability of the expanded uncertainties.
    monte_carlo : bool
        Also run each window's Monte Carlo check (slower).
    seed : int
        Seed of those checks.

    Without ``runs`` and ``points`` the plant file's ``[[runs]]`` or ``[[points]]``
    are used.

    Returns
    -------
    Campaign

    Raises
    ------
    InputError
        If the windows are malformed, both or neither are given, or labels repeat.
    PlantFileError
        If a point's reference names no correction variable.

    Notes
    -----
    Each window is averaged, reconciled and evaluated on its own.  Each result's
    variance is split into a random and a systematic part through the gain of the
    reconciliation and the sensitivities of the evaluation
    (:func:`~perftest.evaluation.joint.variance_split`).  Between windows the
    systematic parts are fully correlated (the same instruments), the random parts
    independent (:func:`~perftest.evaluation.joint.joint_covariance`).  The test
    result of repeated runs is their mean :math:`\\bar r = \\frac1N\\sum_i r_i` with
    :math:`u^2(\\bar r) = \\frac1{N^2}\\sum_i\\sum_j \\mathrm{cov}(r_i, r_j)`
    (GUM 5.2, Eq. 13), so averaging runs shrinks the random part only.  A weighted
    part-load figure is :math:`\\sum_k w_k r_k / \\sum_k w_k` with the same
    covariance.  Guarantees of repeated runs are judged on the mean; of load
    points, per point.

    Examples
    --------
    >>> runs = [("09:00", "10:30"), ("10:30", "12:00")]
    >>> test = evaluate_test(plant, run, runs=runs)  # doctest: +SKIP
    >>> test.results.loc["corrected_heat_rate", ["value", "U95"]]  # doctest: +SKIP
    """
    mode, entries = _window_list(runs, points, plant)
    wins = []
    notes: list = []
    if mode == "points" and (plant.sections.get("guarantees") or []):
        others = [e["label"] for e in entries[1:] if e.get("guarantees") is None]
        if others:
            # A plant-level guarantee is stated for the rated condition; judging a
            # full-load capacity at part load would report a false "not met".
            notes.append(
                f"The plant's [[guarantees]] are judged at the first load point "
                f"({entries[0]['label']}), the rated point; {', '.join(others)} "
                "list no guarantees of their own and are not judged."
            )
            for e in entries[1:]:
                e.setdefault("guarantees", [])
    for i, e in enumerate(entries):
        p = _point_plant(plant, e, i) if mode == "points" else plant
        screened, m, rec, perf, split = _evaluate_window(
            p, run, e, eliminate=eliminate, outlier_alpha=outlier_alpha, level=level,
            monte_carlo=monte_carlo, seed=seed,
        )  # fmt: skip
        w = e.get("weight")
        wins.append(
            WindowResult(
                label=e["label"],
                start=m.start if m.start is not None else pd.Timestamp(e["start"]),
                end=m.end if m.end is not None else pd.Timestamp(e["end"]),
                window_run=screened,
                measurements=m,
                reconciliation=rec,
                performance=perf,
                split=split,
                weight=None if w is None else float(w),
            )
        )
    first = wins[0].performance.results
    names = [n for n in first.index if all(n in w.performance.results.index for w in wins)]
    joint = joint_covariance([w.split for w in wins], [w.performance.cov for w in wins], names)
    values = np.array([[w.performance.results.loc[n, "value"] for n in names] for w in wins])
    dofs = np.array([[w.performance.results.loc[n, "dof"] for n in names] for w in wins])
    index = pd.MultiIndex.from_tuples(
        [(w.label, n) for w in wins for n in names], names=["window", "name"]
    )
    joint_frame = pd.DataFrame(joint, index=index, columns=index)
    if any(w.split.gradient.isna().any(axis=1).any() for w in wins):
        odd = sorted({n for w in wins for n in w.split.gradient.index[
            w.split.gradient.isna().any(axis=1)]})  # fmt: skip
        notes.append(
            f"{', '.join(odd)}: not split into random and systematic parts; taken as fully "
            "correlated between windows."
        )
    if mode == "runs":
        weights = np.full(len(wins), 1.0 / len(wins))
        frame, cov = combine(values, joint, names, weights, dofs, level)
        frame["unit"] = first.loc[names, "unit"]
        frame["description"] = [
            f"{first.loc[n, 'description']}, mean of {len(wins)} runs" for n in names
        ]
        heads = _headline(names)
        u_r = np.array([[w.split.u_random.get(n, math.nan) for n in heads] for w in wins])
        vals = np.array([[w.performance.results.loc[n, "value"] for n in heads] for w in wins])
        rep = repeatability(vals, u_r, heads)
        guarantees = _judge(plant, frame)
        notes.append(
            f"Test result: mean of {len(wins)} runs; systematic uncertainties shared by the "
            "runs, random parts independent (GUM 5.2)."
        )
        cov_frame = pd.DataFrame(cov, index=names, columns=names)
        results = frame[["value", "u", "U95", "unit", "k", "dof", "description"]]
    else:
        rep = pd.DataFrame(columns=["spread", "limit", "chi2", "dof", "p_value", "passed"])
        g = []
        for w in wins:
            gw = w.performance.guarantees.copy()
            gw.insert(0, "point", w.label)
            g.append(gw)
        guarantees = pd.concat(g, ignore_index=True) if g else pd.DataFrame()
        results, cov_frame = _weighted(wins, names, values, joint, dofs, first, level, notes)
    return Campaign(
        mode=mode,
        windows=tuple(wins),
        results=results,
        cov=cov_frame,
        joint=joint_frame,
        repeatability=rep,
        guarantees=guarantees,
        level=float(level),
        notes=tuple(notes),
    )


def _weighted(wins, names, values, joint, dofs, first, level, notes):
    """Weighted part-load figures of the headline ratios (``weighted_<result>``)."""
    empty = pd.DataFrame(columns=["value", "u", "U95", "unit", "k", "dof", "description"])
    if any(w.weight is None for w in wins):
        return empty, pd.DataFrame()
    w = np.array([x.weight for x in wins], dtype=float)
    w = w / w.sum()
    frame, cov = combine(values, joint, names, w, dofs, level)
    # a weighted figure is meaningful for ratios (COP, efficiency, heat rate), not
    # for capacities measured at different loads
    keep = [n for n in _headline(names) if first.loc[n, "unit"] in ("1", "J/J")]
    if not keep:
        return empty, pd.DataFrame()
    out = frame.loc[keep].copy()
    out["unit"] = first.loc[keep, "unit"]
    out["description"] = [
        f"{first.loc[n, 'description']}, weighted over {len(wins)} load points" for n in keep
    ]
    out.index = pd.Index([f"weighted_{n}" for n in keep], name="name")
    idx = [names.index(n) for n in keep]
    cov_frame = pd.DataFrame(cov[np.ix_(idx, idx)], index=out.index, columns=out.index)
    notes.append(
        "Weighted part-load figures: sum of weight x result over the load points, weights "
        "normalised to sum to one ("
        + ", ".join(f"{x.label}: {wt:.3g}" for x, wt in zip(wins, w, strict=True))
        + ")."
    )
    return out[["value", "u", "U95", "unit", "k", "dof", "description"]], cov_frame


def _judge(plant, results: pd.DataFrame) -> pd.DataFrame:
    """Guarantee verdicts of the plant on the combined results."""
    from perftest.evaluation.corrections import guarantees_from_plant

    rows = []
    for g in guarantees_from_plant(plant):
        if g.quantity not in results.index:
            continue  # evaluate() of every run has already refused an unknown quantity
        rows.append(
            g.judge(float(results.loc[g.quantity, "value"]), float(results.loc[g.quantity, "U95"]))
        )
    return pd.DataFrame(rows, columns=list(VERDICT_COLUMNS))
