"""Pre-test uncertainty planning: can the planned instruments reach the contract?

Before an acceptance test the engineer shows that the planned instruments, logged
for the planned duration, give results whose uncertainty the contract allows.
:func:`plan` predicts, from the plant file's design point (``[design]``) and its
instrument list (``[tags]`` with their stated uncertainties):

* each result's standard and expanded uncertainty **with** reconciliation (the
  design-point measurements are reconciled with the plant model and the reconciled
  covariance is propagated by :func:`perftest.evaluate`, exactly as after a test)
  and **without** it (see below);
* each instrument's share of each result's variance (random and systematic part;
  a calibration lot shared by several instruments is one systematic source);
* a what-if table: the predicted U95 of each result when one instrument's
  systematic uncertainty is multiplied by an upgrade factor.

The planned measurements (design values, systematic and random parts, groups and
calibration lots) are built by :mod:`perftest.planning.design`.

Without reconciliation
----------------------
Every input of the results that an instrument measures directly (a tag, a group,
or a model variable bound to a tag, such as ``"main_steam.temperature"``) is taken
as measured.  An input that no instrument measures (``"boiler.heat"``) can only
come from the balances; it is taken as the reconciliation computes it from the
measurements (its linear gain on the raw measurements), which is the least use of
the balances that still gives a value.  For such results the figure without
reconciliation is therefore optimistic; the ``notes`` name the inputs concerned.

Sensitivity to each instrument
------------------------------
The reconciled estimate of any quantity :math:`z` is, to first order, a linear
function :math:`z = G x` of the raw measurements :math:`x` with covariance
:math:`V`.  Because weighted least squares projects with the weights
:math:`V^{-1}`, :math:`\\mathrm{Cov}(z, \\hat x) = G V` [1]_, so
:math:`G = \\mathrm{Cov}(z, \\hat x) V^{-1}` follows from the reconciled covariance
alone.  A result's variance then splits exactly over independent sources
:math:`b_j` (:math:`V = \\sum_j b_j b_j^T`): :math:`u^2 = \\sum_j (r^T b_j)^2`
with :math:`r^T = s^T G` and :math:`s` the result's sensitivities to its inputs.

References
----------
.. [1] S. Narasimhan and C. Jordache, *Data Reconciliation and Gross Error
   Detection*, Gulf, 2000, Ch. 3 (covariance of the reconciled estimates;
   from memory).

Caution: a prediction supports, and does not replace, the applicable test code's
pre-test uncertainty analysis and the judgement of the engineers responsible.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import IndistinguishableWarning, InputError, PerftestError
from perftest.planning.design import (
    DesignPoint,
    _build,
    _plant_fail,
    effective_samples,
    planned_measurements,
    read_design,
)
from perftest.planning.separability import SET_COLUMNS, describe_sets, indistinguishable_sets

__all__ = [
    "UncertaintyPlan",
    "DesignPoint",
    "plan",
    "read_design",
    "planned_measurements",
    "effective_samples",
]

#: Results predicted besides every ``corrected_*`` result and the headline results
#: of the plant's kind (:data:`perftest.evaluation.plant_keys.KEY_RESULTS`).
PLAN_RESULTS = (
    "gross_power",
    "net_power",
    "heat_input",
    "first_law_efficiency",
    "heat_rate",
    "carnot_efficiency",
    "second_law_efficiency",
)

#: Upgrade factor of the what-if table when none is given.
DEFAULT_UPGRADE_FACTOR = 0.5


# --------------------------------------------------------------------------- propagation


class _AsMeasured:
    """Serves results' inputs as a plain calculation without reconciliation would.

    Inputs an instrument measures are the raw planned measurements; the others come
    from the reconciliation's linear gain (module notes).
    """

    def __init__(self, rec, m, gains: dict, direct: dict):
        self._rec, self._m, self._gains, self._direct = rec, m, gains, direct
        self.dead_state = rec.dead_state
        # The model's layout (which units are boilers, condensers) decides which
        # results a kind has; values still come from value() and covariance().
        self.model = rec.model

    def value(self, name):
        if name in self._direct:
            return float(self._m.value[self._m.index(self._direct[name])])
        return self._rec.value(name)

    def gain(self, name) -> np.ndarray:
        if name in self._direct:
            g = np.zeros(len(self._m.tags))
            g[self._m.index(self._direct[name])] = 1.0
            return g
        if name not in self._gains:
            # only the results' inputs have gains; the exergy account skips the rest
            raise PerftestError(f"No planned gain for {name!r}.")
        return self._gains[name]

    def covariance(self, names):
        if isinstance(names, str):
            names = [names]
        R = np.array([self.gain(n) for n in names])
        return R @ np.asarray(self._m.cov) @ R.T


def _direct_tag(rec, name: str, tags) -> str | None:
    """Tag or group that measures ``name`` directly, else None."""
    if name in tags:
        return name
    spec = getattr(getattr(rec, "model", None), "spec", None)
    if spec is None or "." not in name:
        return None
    owner, var = name.split(".", 1)
    src = None
    if owner in spec.streams:
        src = spec.streams[owner].sources.get(var)
    elif owner in spec.units:
        src = spec.units[owner].variables.get(var)
    if src is not None and getattr(src, "kind", None) == "measured" and src.tag in tags:
        return src.tag
    return None


def _inverse(V: np.ndarray) -> np.ndarray:
    """Pseudo-inverse of a covariance through its correlation matrix (scale-free)."""
    d = np.sqrt(np.clip(np.diag(V), 0.0, None))
    s = np.where(d > 0, 1.0 / np.where(d > 0, d, 1.0), 0.0)
    return s[:, None] * np.linalg.pinv(V * np.outer(s, s), rcond=1e-12, hermitian=True) * s[None, :]


def _evaluate(plant, rec_like, level):
    from perftest.evaluation.results import evaluate

    return evaluate(plant, rec_like, level=level, monte_carlo=False)


def _sensitivities(perf, names: list, outputs: list) -> np.ndarray:
    S = np.zeros((len(outputs), len(names)))
    for i, o in enumerate(outputs):
        b = perf.budgets[o]["sensitivity"]
        for j, n in enumerate(names):
            if n in b.index:
                S[i, j] = float(b.loc[n])
    return S


def _reconcile(plant, m):
    from perftest.balance.plant import reconcile
    from perftest.errors import ReconciliationWarning

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ReconciliationWarning)
        return reconcile(plant, m)


# --------------------------------------------------------------------------- plan


@dataclass(frozen=True, eq=False)
class UncertaintyPlan:
    """Outcome of :func:`plan`.

    Attributes
    ----------
    results : pandas.DataFrame
        Index: result.  Columns ``value, unit, u_with, U95_with, u_without,
        U95_without, ratio, U95_allowed, within_allowed`` [SI];
        ``ratio = U95_with / U95_without``; ``U95_allowed`` from
        ``[design.allowed]`` (nan when not stated) and ``within_allowed`` whether
        the prediction with reconciliation reaches it (None when not stated).
    shares : pandas.DataFrame
        One row per (result, source): ``result, source, instrument, part, share_with,
        share_without`` (fractions of the result's variance; a source is an
        instrument's random or systematic part, a calibration lot, or the fuel's
        heating value).
    what_if : pandas.DataFrame
        One row per (instrument, result): ``instrument, result, U95_with,
        U95_with_upgraded, U95_without, U95_without_upgraded``.
    instruments : pandas.DataFrame
        Per tag: ``quantity, value, u_systematic, scatter, n_samples, n_effective,
        u_random, shared_calibration`` [SI].
    measurements : perftest.run.measurements.Measurements
        The planned design-point measurements.
    performance : perftest.evaluation.results.Performance
        Evaluation of the reconciled design point.
    duration : float
        Planned test duration [s].
    upgrade_factor : float
        Factor applied to one instrument's systematic uncertainty in ``what_if``.
    level : float
        Coverage probability of the expanded uncertainties.
    global_test : dict
        Global test of the design-point reconciliation (a failing test means the
        design values do not close the balances; the prediction is then made at
        the reconciled point).
    notes : tuple of str
    indistinguishable : pandas.DataFrame
        Sets of planned instruments that no measurement test can tell apart at the
        design point (:func:`perftest.planning.separability.indistinguishable_sets`:
        columns ``set, kind, tags, min_correlation, separating_z``); empty when every
        gross error can be located.
    """

    results: pd.DataFrame
    shares: pd.DataFrame
    what_if: pd.DataFrame
    instruments: pd.DataFrame
    measurements: object
    performance: object
    duration: float
    upgrade_factor: float
    level: float
    global_test: dict
    notes: tuple = field(default=())
    indistinguishable: pd.DataFrame = field(
        default_factory=lambda: pd.DataFrame(columns=SET_COLUMNS)
    )

    def ranking(self, result: str, *, reconciled: bool = True) -> pd.DataFrame:
        """Instruments ranked by their share of one result's variance.

        Returns
        -------
        DataFrame
            Index instrument (a lot counts as one), columns ``random, systematic,
            share`` (fractions), largest share first.
        """
        if result not in self.results.index:
            raise InputError(
                f"The 'result' parameter of ranking must be one of "
                f"{', '.join(self.results.index)}. Got {result!r}.",
                parameter="result",
            )
        col = "share_with" if reconciled else "share_without"
        s = self.shares[self.shares["result"] == result]
        t = s.pivot_table(index="instrument", columns="part", values=col, aggfunc="sum")
        t = t.reindex(columns=["random", "systematic"]).fillna(0.0)
        t["share"] = t.sum(axis=1)
        return t.sort_values("share", ascending=False)

    def to_dict(self) -> dict:
        """JSON-ready plain data (SI values)."""

        def clean(v):
            if isinstance(v, float | np.floating):
                return float(v) if math.isfinite(v) else None
            if isinstance(v, np.integer):
                return int(v)
            return v

        def records(df):
            return [{k: clean(v) for k, v in r.items()} for r in df.to_dict(orient="records")]

        return {
            "duration_s": self.duration,
            "level": self.level,
            "upgrade_factor": self.upgrade_factor,
            "global_test": {k: clean(v) for k, v in self.global_test.items()},
            "results": {
                str(k): {c: clean(v) for c, v in r.items()}
                for k, r in self.results.to_dict(orient="index").items()
            },
            "instruments": records(self.instruments.reset_index()),
            "shares": records(self.shares),
            "what_if": records(self.what_if),
            "notes": list(self.notes),
            "indistinguishable": [
                {
                    "set": int(r["set"]),
                    "kind": r["kind"],
                    "tags": list(r["tags"]),
                    "min_correlation": clean(r["min_correlation"]),
                    "separating_z": clean(r["separating_z"]),
                }
                for r in self.indistinguishable.to_dict(orient="records")
            ],
        }

    def __repr__(self) -> str:
        from perftest.display.views import plan_text

        return plan_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import plan_html

        return plan_html(self)


def _variances(S_rows: np.ndarray, B: np.ndarray, hv: np.ndarray) -> np.ndarray:
    """Per result: contribution of each source (columns of B) and the heating value."""
    c = (S_rows @ B) ** 2
    return np.column_stack([c, hv**2]) if hv is not None else c


def plan(
    plant,
    *,
    duration=None,
    interval=None,
    upgrade_factor: float = DEFAULT_UPGRADE_FACTOR,
    level: float = 0.95,
    what_if: bool = True,
    runs=None,
) -> UncertaintyPlan:
    """Predict the uncertainty of a planned test's results, before the test.

    Parameters
    ----------
    plant : perftest.plant.file.Plant or path
        Its ``[design]`` table gives the design point (docs/plant-file.md).
    duration, interval : str or float, optional
        Planned duration and sampling interval (``"2h"``, ``"1min"`` or seconds);
        default from ``[design]``, else 2 h and 1 min (noted).
    upgrade_factor : float, default 0.5
        What-if: one instrument's systematic uncertainty multiplied by this factor
        (random scatter is mostly process variation and is left as it is).  For an
        instrument of a shared calibration lot only its own part of the lot is
        scaled; the errors of the lot then no longer cancel in differences, which
        can make a result worse (the table shows it).
    level : float, default 0.95
        Coverage probability of the expanded uncertainties.
    what_if : bool, default True
        Compute the what-if table (one reconciliation per instrument).
    runs : int, optional
        Number of repeated runs planned (default ``[design] runs``, else 1).  With
        more than one, ``results`` gains ``runs``, ``u_mean`` and ``U95_mean``: the
        predicted uncertainty of the mean of the runs,
        :math:`u^2 = u_s^2 + u_r^2/N`, since every run shares the instruments'
        systematic errors and has its own scatter (GUM 5.2, Eq. 13 with
        :math:`\\mathrm{cov}(r_i, r_j) = u_s^2` for :math:`i \\ne j`); the coverage
        factor is the single run's (conservative: the mean has more degrees of
        freedom).

    Returns
    -------
    UncertaintyPlan

    Raises
    ------
    PlantFileError
        ``[design]`` missing or malformed (names key and line), or the plant's
        model/performance tables are invalid.
    InputError
        A bad ``duration``, ``interval``, ``upgrade_factor`` or ``level``.

    Warns
    -----
    IndistinguishableWarning
        Planned instruments form sets whose gross errors no measurement test can
        tell apart (``indistinguishable`` of the result lists them).

    Notes
    -----
    See the module notes for the planned measurements, the meaning of "without
    reconciliation" and the split of the variance over the instruments.

    Examples
    --------
    >>> tp = plan("sample_data/brackenfold/plant.toml", what_if=False)  # doctest: +SKIP
    >>> tp.results[["U95_with", "U95_without"]]  # doctest: +SKIP
    """
    from perftest.plant.file import Plant, load_plant

    if not isinstance(plant, Plant):
        plant = load_plant(plant)
    try:
        f = float(upgrade_factor)
    except (TypeError, ValueError):
        f = math.nan
    if not (math.isfinite(f) and f >= 0):
        raise InputError(
            "The 'upgrade_factor' parameter of plan must be a non-negative number. "
            f"Got {upgrade_factor!r}.",
            parameter="upgrade_factor",
        )
    if not 0.0 < level < 1.0:
        raise InputError(
            f"The 'level' parameter of plan must lie between 0 and 1. Got {level!r}.",
            parameter="level",
        )
    design = read_design(plant, duration=duration, interval=interval)
    n_runs = _planned_runs(plant, runs)
    notes = list(design.notes)
    base = _build(plant, design)
    m = base.measurements
    rec = _reconcile(plant, m)
    gt = rec.global_test
    if not gt["passed"]:
        notes.append(
            f"The design values do not close the balances (global test chi2 = "
            f"{gt['chi2']:.3g}, dof = {gt['dof']}); the prediction is linearised at the "
            "reconciled design point. Check the design values."
        )
    sets = indistinguishable_sets(rec)
    if len(sets):
        warnings.warn(describe_sets(sets), IndistinguishableWarning, stacklevel=2)
    perf = _evaluate(plant, rec, level)
    from perftest.evaluation.plant_keys import key_results, performance_kind

    wanted = dict.fromkeys((*PLAN_RESULTS, *key_results(performance_kind(plant))))
    outputs = [o for o in wanted if o in perf.results.index]
    outputs += [o for o in perf.results.index if o.startswith("corrected_")]
    inputs = perf.inputs
    hv_names = [n for n in inputs.index if inputs.loc[n, "role"] == "heating_value"]
    names = [n for n in inputs.index if n not in hv_names]
    entries = list(m.tags)

    # gains of the inputs on the raw planned measurements (module notes)
    C = np.asarray(rec.covariance(names + entries), dtype=float)
    k = len(names)
    Vinv = _inverse(np.asarray(m.cov))
    gains = {n: C[i, k:] @ Vinv for i, n in enumerate(names)}
    direct = {n: t for n in names if (t := _direct_tag(rec, n, entries)) is not None}
    via_balance = [n for n in names if n not in direct]
    if via_balance:
        notes.append(
            "Without reconciliation, inputs no instrument measures are still computed "
            f"from the balances: {', '.join(via_balance)}; the figures without "
            "reconciliation of the results using them are optimistic."
        )
    view = _AsMeasured(rec, m, gains, direct)
    perf_wo = _evaluate(plant, view, level)

    def split(p, gain_of):
        S = _sensitivities(p, names, outputs)
        G = np.array([gain_of(n) for n in names]) if names else np.zeros((0, len(entries)))
        r = S @ G
        hv = None
        if hv_names:
            s_hv = _sensitivities(p, hv_names, outputs)
            u_hv = inputs.loc[hv_names, "u"].to_numpy(float)
            hv = (s_hv * u_hv[None, :]).sum(axis=1)
        return r, hv

    r_with, hv_with = split(perf, lambda n: gains[n])
    r_wo, hv_wo = split(perf_wo, view.gain)
    contrib_with = _variances(r_with, base.B, hv_with)
    contrib_wo = _variances(r_wo, base.B, hv_wo)

    res = perf.results.loc[outputs]
    res_wo = perf_wo.results.loc[outputs]
    results = pd.DataFrame(
        {
            "value": res["value"],
            "unit": res["unit"],
            "u_with": res["u"],
            "U95_with": res["U95"],
            "u_without": res_wo["u"],
            "U95_without": res_wo["U95"],
        }
    )
    with np.errstate(divide="ignore", invalid="ignore"):
        results["ratio"] = results["U95_with"] / results["U95_without"]
    limit = []
    for o in outputs:
        spec = design.allowed.get(o)
        if spec is None:
            limit.append(math.nan)
        elif spec[1] == "percent":
            limit.append(spec[0] / 100.0 * abs(float(results.loc[o, "value"])))
        else:
            limit.append(spec[0])
    results["U95_allowed"] = limit
    results["within_allowed"] = [
        None if math.isnan(a) else bool(u <= a)
        for u, a in zip(results["U95_with"], limit, strict=True)
    ]
    unknown = sorted(set(design.allowed) - set(outputs))
    if unknown:
        raise _plant_fail(plant, "design", "allowed", unknown[0])(
            f"{unknown[0]!r} is not a predicted result ({', '.join(outputs)})."
        )
    results.index.name = "result"

    src = base.sources.copy()
    if hv_names:
        label = f"fuel heating value ({', '.join(hv_names)})"
        src.loc[len(src)] = (label, "fuel heating value", "systematic")
    rows = []
    for i, o in enumerate(outputs):
        tw = contrib_with[i].sum()
        to = contrib_wo[i].sum()
        for j, s in src.iterrows():
            rows.append(
                dict(
                    result=o,
                    source=s["label"],
                    instrument=s["instrument"],
                    part=s["part"],
                    share_with=contrib_with[i, j] / tw if tw > 0 else 0.0,
                    share_without=contrib_wo[i, j] / to if to > 0 else 0.0,
                )
            )
        # The split must add up to the propagated variance (same linearisation).
        if tw > 0 and not math.isclose(tw, float(res.loc[o, "u"]) ** 2, rel_tol=1e-3):
            notes.append(
                f"{o}: the instrument shares cover {tw / float(res.loc[o, 'u']) ** 2:.3f} "
                "of the propagated variance (linearisation differs)."
            )
    shares = pd.DataFrame(
        rows, columns=["result", "source", "instrument", "part", "share_with", "share_without"]
    )
    if n_runs > 1:
        random = (src["part"] == "random").to_numpy()
        var_r = contrib_with[:, random].sum(axis=1)
        var = results["u_with"].to_numpy(float) ** 2
        u_mean = np.sqrt(np.maximum(var - var_r * (1.0 - 1.0 / n_runs), 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            k = np.where(results["u_with"] > 0, results["U95_with"] / results["u_with"], 0.0)
        results["runs"] = n_runs
        results["u_mean"] = u_mean
        results["U95_mean"] = k * u_mean

    wf = pd.DataFrame(
        columns=[
            "instrument",
            "result",
            "U95_with",
            "U95_with_upgraded",
            "U95_without",
            "U95_without_upgraded",
        ]
    )
    if what_if:
        wf = _what_if(plant, design, base, rec, outputs, results, r_wo, hv_wo, f, level)
    return UncertaintyPlan(
        results=results,
        shares=shares,
        what_if=wf,
        instruments=base.instruments,
        measurements=m,
        performance=perf,
        duration=design.duration,
        upgrade_factor=f,
        level=float(level),
        global_test=dict(gt),
        notes=tuple(dict.fromkeys(notes)),
        indistinguishable=sets,
    )


def _planned_runs(plant, runs) -> int:
    """Repeated runs planned: the argument, else ``[design] runs``, else 1."""
    if runs is None:
        value = (plant.sections.get("design") or {}).get("runs", 1)
        if not (isinstance(value, int) and not isinstance(value, bool) and value >= 1):
            raise _plant_fail(plant, "design", "runs")(
                f"[design] runs must be a whole number of runs >= 1. Got {value!r}."
            )
        return int(value)
    if not (isinstance(runs, int) and not isinstance(runs, bool) and runs >= 1):
        raise InputError(
            f"The 'runs' parameter of plan must be a whole number >= 1. Got {runs!r}.",
            parameter="runs",
        )
    return int(runs)


def _what_if(plant, design, base, rec, outputs, results, r_wo, hv_wo, f, level):
    """Predicted U95 when one instrument's systematic uncertainty is scaled by ``f``."""
    rows = []
    k_wo = (results["U95_without"] / results["u_without"]).to_numpy(float)
    for t in plant.tags:
        if base.instruments.loc[t, "u_systematic"] == 0:
            new_with = results["U95_with"].to_numpy(float)
            new_wo = results["U95_without"].to_numpy(float)
        else:
            trial = _build(plant, design, {t: f})
            p = _evaluate(plant, _reconcile(plant, trial.measurements), level)
            new_with = p.results.loc[outputs, "U95"].to_numpy(float)
            var = _variances(r_wo, trial.B, hv_wo).sum(axis=1)
            # the coverage factor is kept: the inputs' degrees of freedom do not change
            new_wo = k_wo * np.sqrt(var)
        for i, o in enumerate(outputs):
            rows.append(
                dict(
                    instrument=t,
                    result=o,
                    U95_with=float(results.loc[o, "U95_with"]),
                    U95_with_upgraded=float(new_with[i]),
                    U95_without=float(results.loc[o, "U95_without"]),
                    U95_without_upgraded=float(new_wo[i]),
                )
            )
    return pd.DataFrame(rows)
