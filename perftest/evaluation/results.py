"""Performance results of a reconciled plant, with propagated uncertainty.

:func:`evaluate` takes a plant and its :class:`~perftest.model.PlantReconciliation`
and computes every result of the summary: gross and net power, heat input,
first-law efficiency, heat rate, the Carnot and Curzon-Ahlborn bounds between the
heat source and sink, second-law and exergetic efficiency, exergy destruction per
unit (checked against the Gouy-Stodola relation), results corrected to reference
conditions and the guarantee verdicts.

Uncertainty
-----------
All results are functions of a handful of inputs: the reconciled values named in
``[performance]`` and ``[[corrections]]`` (their joint covariance comes from the
reconciliation, so correlations created by the balances are kept) and the fuel's
heating value (independent of the measurements).  The results' covariance is
propagated linearly (:func:`perftest.evaluation.uncertainty.propagate`, GUM clause 5.2) with
an uncertainty budget per result; a Monte Carlo propagation (GUM Supplement 1,
:func:`perftest.evaluation.uncertainty.monte_carlo`) of the same function is kept as a check
of the linearisation.

Speed
-----
A trend of many windows evaluates one plant thousands of times: what depends on the
plant file only (the checked tables, the heating value, the correction curves, the
guarantees, the layout of the results table) is kept per plant object
(:mod:`perftest.evaluation.memo`, checked against the plant's tables on every
call), and the model is evaluated at the estimate and at the points of the central
differences in one vectorised call.  The numbers are those of the plain sequence.

References
----------
.. [1] JCGM 100:2008, *Evaluation of measurement data - Guide to the expression of
   uncertainty in measurement* (GUM), clauses 5.1-5.2.
.. [2] JCGM 101:2008, *Propagation of distributions using a Monte Carlo method*
   (GUM Supplement 1).
.. [3] J. Szargut, D. R. Morris and F. R. Steward, *Exergy Analysis of Thermal,
   Chemical and Metallurgical Processes*, Hemisphere, 1988 (standard chemical
   exergies, Table I).
.. [4] T. J. Kotas, *The Exergy Method of Thermal Plant Analysis*, Butterworths,
   1985, Sect. 2.5 (ratio of chemical exergy to net calorific value of fuels).
"""

from __future__ import annotations

import contextlib
import contextvars
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from perftest.errors import InputError, PerftestError
from perftest.evaluation import kinds
from perftest.evaluation.boiler import BOILER_UNITS
from perftest.evaluation.exergy_account import _exergy_analysis
from perftest.evaluation.frames import ResultsLayout, budget_frames, empty_frame
from perftest.evaluation.fuel_basis import (  # noqa: F401 - re-exported
    DEFAULT_FUEL_EXERGY_RATIO,
    _fuel_basis,
    _metering_conditions,
    fuel_exergy_ratio,
)
from perftest.evaluation.guarantees import VERDICT_COLUMNS
from perftest.evaluation.kinds import DESCRIPTIONS, RESULT_UNITS  # noqa: F401 - re-exported
from perftest.evaluation.linear_inputs import input_dofs as _input_dofs
from perftest.evaluation.linear_inputs import results_at_points as _results_at_points
from perftest.evaluation.memo import plant_memo
from perftest.evaluation.plant_keys import (  # noqa: F401 - re-exported
    _check_name,
    _performance_table,
    _plant_error,
)
from perftest.evaluation.unit_checks import (
    check_correction_entries,
    check_factor,
    check_guarantee_units,
)

__all__ = ["Performance", "evaluate", "RESULT_UNITS", "fuel_exergy_ratio"]

# Number of Monte Carlo trials of the check: 20 000 trials resolve a standard
# uncertainty to about 0.5 % (relative standard error 1/sqrt(2M)), plenty for a
# check of the linear propagation, and take well under a second.
_MC_TRIALS = 20_000

# True inside results_only() (see there)
_RESULTS_ONLY: contextvars.ContextVar[bool] = contextvars.ContextVar(
    "perftest_results_only", default=False
)


@contextlib.contextmanager
def results_only():
    """Within the block, :func:`evaluate` builds only its ``results`` table (and ``cov``).

    For loops over many windows that read the results' values and uncertainties:
    the corrections, guarantees and inputs tables come back empty, every check that
    can raise still runs, and the results are the same.
    """
    token = _RESULTS_ONLY.set(True)
    try:
        yield
    finally:
        _RESULTS_ONLY.reset(token)


# --------------------------------------------------------------------------- result


@dataclass(frozen=True, eq=False)
class Performance:
    """Outcome of :func:`evaluate`.

    Attributes
    ----------
    results : pandas.DataFrame
        Index: result name.  Columns ``value, u, U95, unit, k, dof, description,
        basis`` [SI]; ``U95`` is the expanded uncertainty at ``level``, ``k`` its
        coverage factor from Student's t at the Welch-Satterthwaite effective
        degrees of freedom ``dof``; ``basis`` is ``"lhv"`` or ``"hhv"`` for the
        results that use the fuel's heating value, else empty.
    budgets : dict[str, pandas.DataFrame]
        Per result: uncertainty budget indexed by input, columns ``estimate, u,
        sensitivity, u_contribution, share`` (shares sum to one).
    guarantees : pandas.DataFrame
        Columns ``quantity, corrected_value, U95, guaranteed, direction, verdict,
        unit, margin, rule, rule_statement`` [SI; ``unit`` is the display unit of the
        plant file; ``rule`` the verdict rule and ``rule_statement`` its sentence].
    corrections : pandas.DataFrame
        One row per correction curve: ``result, variable, condition, reference,
        kind, factor, change, relative_change`` (factor of a multiplicative curve,
        offset of an additive one; ``change`` is what this correction alone changes
        the result by [SI], ``relative_change`` that change over the result).
    exergy : pandas.DataFrame
        One row per unit: ``unit, type, exergy_in, exergy_out, work_in, work_out,
        destroyed, u_destroyed, gouy_stodola, heat, share`` [W; share of the fuel
        exergy; ``heat`` is the heat absorbed by a boiler or rejected by a condenser].
    exergy_closure : perftest.evaluation.performance.ExergyClosure or None
        Plant exergy balance: fuel exergy = net power + destroyed + lost.
    exergy_losses : dict[str, float]
        Exergy lost across the plant boundary [W] (cooling water, auxiliaries
        outside the model, other streams crossing the boundary).
    exergy_products : dict[str, float]
        Exergy products besides net power [W]: ``"heat export"`` (CHP),
        ``"cooling"`` (chiller: the chilled water's exergy gain), ``"heating"``
        (heat pump: the heated water's exergy gain).
    inputs : pandas.DataFrame
        Index: input name.  Columns ``value, u, role`` [SI].
    monte_carlo : pandas.DataFrame or None
        Monte Carlo check per result: ``value, u, low, high, u_linear, ratio``.
    cov : pandas.DataFrame
        Covariance of the results [SI squared].
    level : float
        Coverage probability of ``U95``.
    dead_state : tuple of float
        ``(T0 [K], p0 [Pa])`` of the exergy values.
    notes : tuple of str
        Assumptions and warnings for the report.
    """

    results: pd.DataFrame
    budgets: dict
    guarantees: pd.DataFrame
    corrections: pd.DataFrame
    exergy: pd.DataFrame
    exergy_closure: object
    exergy_losses: dict
    inputs: pd.DataFrame
    monte_carlo: pd.DataFrame | None
    cov: pd.DataFrame
    level: float
    dead_state: tuple
    notes: tuple = field(default=())
    exergy_products: dict = field(default_factory=dict)

    def value(self, name: str) -> float:
        """Value of one result [SI]."""
        return float(self._row(name)["value"])

    def uncertainty(self, name: str) -> float:
        """Standard uncertainty of one result [SI]."""
        return float(self._row(name)["u"])

    def _row(self, name: str):
        if name not in self.results.index:
            raise InputError(
                f"The 'name' parameter must be a result of this evaluation "
                f"({', '.join(self.results.index)}). Got {name!r}.",
                parameter="name",
            )
        return self.results.loc[name]

    def ufloats(self) -> dict:
        """Results as correlated ``uncertainties`` numbers, keyed by name.

        Correlations between results (net power and heat rate share inputs) are
        kept, so arithmetic on the returned numbers propagates correctly.
        """
        from uncertainties import correlated_values

        names = list(self.results.index)
        cov = self.cov.loc[names, names].to_numpy()
        nums = correlated_values(self.results["value"].to_numpy(float), cov, tags=names)
        return dict(zip(names, nums, strict=True))

    def to_frame(self, units="engineering") -> pd.DataFrame:
        """The results in engineering units (MW, %, kJ/kWh, °C), or as stored (``"si"``).

        Columns ``value, u, U95, unit, description``, indexed by result name.
        """
        from perftest.display.views import performance_frame

        return performance_frame(self, units)

    def __repr__(self) -> str:
        from perftest.display.views import performance_text

        return performance_text(self)

    def _repr_html_(self) -> str:
        from perftest.display.views import performance_html

        return performance_html(self)


# --------------------------------------------------------------------------- evaluate


def evaluate(
    plant,
    reconciliation,
    *,
    level: float = 0.95,
    monte_carlo: bool = True,
    seed: int = 20_260_514,
    detail: bool = True,
) -> Performance:
    """Compute the performance results of a reconciled plant with uncertainty.

    Parameters
    ----------
    plant : perftest.plant.file.Plant
        Its ``[performance]``, ``[fuel]``, ``[[corrections]]`` and ``[[guarantees]]``
        tables say what to compute.
    reconciliation : perftest.model.PlantReconciliation
        Provides ``value(name)``, ``covariance(names)``, ``streams``, ``model`` and
        ``dead_state``.
    level : float, default 0.95
        Coverage probability of the expanded uncertainties.
    monte_carlo : bool, default True
        Also propagate by Monte Carlo as a check of the linear propagation.
    seed : int
        Seed of the Monte Carlo check (deterministic by default).
    detail : bool, default True
        Also tabulate the uncertainty budget of every result and the exergy
        analysis per unit.  False leaves ``Performance.budgets``, ``exergy`` and
        ``exergy_losses`` empty and ``exergy_closure`` None, and saves time where
        only values and uncertainties are needed (a trend of many windows); the
        results are the same.

    Returns
    -------
    Performance

    Raises
    ------
    PlantFileError
        If ``[performance]`` or ``[fuel]`` is missing or names unknown variables.
    PerftestError
        If a needed variable is not observable.

    Notes
    -----
    With gross power :math:`P_g`, auxiliary power :math:`P_a`, fuel flow
    :math:`\\dot m_f` and heating value :math:`H`:

    .. math::
        P_n = P_g - P_a,\\quad \\dot Q_F = \\dot m_f H,\\quad
        \\eta_I = P_n/\\dot Q_F,\\quad HR = \\dot Q_F/P_n,\\quad
        \\eta_C = 1 - T_{sink}/T_{source},\\quad \\eta_{II} = \\eta_I/\\eta_C

    Examples
    --------
    >>> perf = evaluate(plant, rec)                        # doctest: +SKIP
    >>> perf.results.loc["first_law_efficiency", ["value", "U95"]]  # doctest: +SKIP
    """
    from perftest.evaluation import uncertainty as unc
    from perftest.evaluation.corrections import (
        apply_corrections,
        curves_from_plant,
        guarantees_from_plant,
    )

    if not (hasattr(reconciliation, "value") and hasattr(reconciliation, "covariance")):
        raise InputError(
            "The 'reconciliation' parameter of evaluate must be the result of "
            f"perftest.reconcile(plant, measurements). Got {type(reconciliation).__name__}.",
            parameter="reconciliation",
        )
    if not 0.0 < level < 1.0:
        raise InputError(
            f"The 'level' parameter of evaluate must lie between 0 and 1. Got {level!r}.",
            parameter="level",
        )
    rec = reconciliation
    bare = _RESULTS_ONLY.get()
    # Work that depends on the plant file only is kept per plant (memo.py); each
    # step still runs in its place, so errors come in the same order.
    memo = plant_memo(plant)
    step = memo.get if memo is not None else _compute
    table = step("performance", _performance_table, plant)
    # rec.value of each name once per call (gather, the checks and the inputs)
    seen: dict = {}

    def value(n):
        try:
            return seen[n]
        except KeyError:
            v = seen[n] = rec.value(n)
            return v

    needs = kinds.gather(plant, table, rec, value=value)
    notes: list[str] = list(needs.notes)

    # ---- inputs taken from the reconciliation (joint covariance)
    refs: dict = {}  # input name -> role (the first role that uses it)
    for role, ns in needs.refs.items():
        for n in ns:
            _check_name(rec, n, f"performance.{role}", plant, value)
            refs.setdefault(n, role)
    fuel = None
    if table.get("heat_input") == "fuel" or needs.kind == "boiler":
        fuel = dict(step("fuel", _fuel_basis, plant, table))
        notes += fuel.pop("notes")
        _check_name(rec, fuel["flow"], f"fuel.{fuel['per']}_flow", plant, value)
        refs.setdefault(fuel["flow"], "fuel_flow")
        fuel["flow_name"] = fuel["flow"]
        fuel["hv_name"] = f"fuel.{fuel['basis']}"
    for n in needs.names():
        if n not in refs:
            _check_name(rec, n, "performance", plant, value)
            refs[n] = "stream state"
    step("correction entries", check_correction_entries, plant)
    curves = step("curves", curves_from_plant, plant)
    for c in curves:
        for var in c.variables:
            if var not in refs:
                _check_name(rec, var, "corrections", plant, value)
                refs[var] = f"condition:{var}"

    rec_names = list(refs)
    x_rec = np.array([value(n) for n in rec_names], dtype=float)
    cov_rec = np.asarray(rec.covariance(rec_names), dtype=float)
    names = list(rec_names)
    x = list(x_rec)
    blocks = [cov_rec]
    roles = dict(refs)
    if fuel is not None:
        hv_name = fuel["hv_name"]
        names.append(hv_name)
        x.append(fuel["hv"])
        blocks.append(np.array([[fuel["u_hv"] ** 2]]))
        roles[hv_name] = "heating_value"
    x = np.asarray(x, dtype=float)
    n_in = len(names)
    cov = np.zeros((n_in, n_in))
    i0 = 0
    for b in blocks:
        cov[i0 : i0 + b.shape[0], i0 : i0 + b.shape[0]] = b
        i0 += b.shape[0]
    cov = 0.5 * (cov + cov.T)
    pos = {n: i for i, n in enumerate(names)}

    # ---- which results are corrected, and by which curves
    corrected_of: dict = {}
    for c in curves:
        corrected_of.setdefault(c.result, []).append(c)
    base_outputs = kinds.output_names(needs, fuel is not None)
    # The boiler results (a fired plant) come from their own block below; a
    # correction of one of them is applied to that block's value.
    boiler_names = list(BOILER_UNITS) if needs.fired else []
    for result in corrected_of:
        if result not in base_outputs and result not in boiler_names:
            raise _plant_error(
                plant,
                f"[[corrections]] result = {result!r} is not a result of this plant "
                f"(kind = {needs.kind!r}: {', '.join(base_outputs + boiler_names)}).",
                "corrections",
            )
    boiler_corrected = {r: cs for r, cs in corrected_of.items() if r not in base_outputs}
    corrected_of = {r: cs for r, cs in corrected_of.items() if r in base_outputs}
    outputs = base_outputs + [f"corrected_{r}" for r in corrected_of]

    known: list = []  # (points, results) the model was already evaluated at

    def model(v):
        """Results from inputs; ``v`` is (n_in,) or (n_in, N) (rows = inputs)."""
        for at, y in known:
            if v.shape == at.shape and (v == at).all():  # the same points (no NaN in x)
                return y.copy()
        out = kinds.outputs(needs, lambda n: v[pos[n]], fuel)
        conditions = {var: v[pos[var]] for c in curves for var in c.variables}
        for result, cs in corrected_of.items():
            out[f"corrected_{result}"] = apply_corrections(out[result], cs, conditions)
        return np.array([np.asarray(out[k], dtype=float) for k in outputs])

    # The results at x and at the points of the central differences of the linear
    # propagation below, in one vectorised call (the same numbers, element by
    # element); where that call raises or meets a floating-point exception, x alone
    # first, so that errors and warnings come as they always do.
    known += _results_at_points(model, x, cov, len(outputs))
    y0 = model(x)
    if not known:
        known.append((x.copy(), y0.copy()))
    # Check the arithmetic against the one-function-per-relation module: the values
    # must agree with perftest.evaluation.performance at the estimate.
    kinds.cross_check(needs.kind, dict(zip(outputs, y0, strict=True)), needs.T0)

    # Degrees of freedom of each input: a measured tag (or a model variable it
    # measures) carries its averaged measurement's dof; the rest count as infinite.
    # Welch-Satterthwaite over these inputs then gives each result's effective dof
    # and its coverage factor from Student's t (GUM G.4).
    dof_in = _input_dofs(rec, names)
    prop = unc.propagate(
        model,
        x,
        cov,
        names=names,
        output_names=outputs,
        level=level,
        vectorized=True,
        dof=dof_in,
    )
    basis = fuel["basis"] if fuel is not None else ""
    layout = step(
        ("layout", tuple(outputs), needs.kind, basis), _results_layout, outputs, needs.kind, basis
    )
    results = layout.frame(prop.value, prop.u, prop.U, prop.k, prop.dof)
    if needs.kind == "refrigeration" and "heat_rejected" in needs.refs:
        results, cov_out_extra = _with_heat_balance(rec, needs, results, notes, level)
    else:
        cov_out_extra = None
    # Stream states enter only the results that use them (mean temperatures, heat
    # export); elsewhere their rows would be zeros and are left out.
    budget_tables = (
        budget_frames(prop, outputs, [roles.get(n) == "stream state" for n in names])
        if detail
        else {}
    )
    cov_out = layout.square(prop.cov)
    block = None
    if needs.fired:
        from perftest.evaluation.boiler import boiler_results

        fb = fuel if fuel is not None else step("fuel", _fuel_basis, plant, table)
        block = boiler_results(
            plant, rec, fb["u_hv"] / fb["hv"], level=level, monte_carlo=monte_carlo, seed=seed
        )
        notes += block.notes
        results = pd.concat([results, block.results])
        budget_tables.update(block.budgets if detail else {})
        # the boiler block is propagated on its own: no correlation with the other
        # results is claimed
        cov_out = cov_out.reindex(index=results.index, columns=results.index, fill_value=0.0)
        cov_out.loc[block.cov.index, block.cov.columns] = block.cov
        if boiler_corrected:
            results, cov_out, extra = _corrected_boiler_results(
                boiler_corrected, results, cov_out, x, cov, pos, level
            )
            budget_tables.update(extra if detail else {})
    if cov_out_extra is not None:
        # The raw closure is kept apart from the reconciled results (no correlation
        # with them is claimed).
        cov_out = cov_out.reindex(index=results.index, columns=results.index, fill_value=0.0)
        cov_out.loc["heat_balance_closure", "heat_balance_closure"] = cov_out_extra

    # ---- Monte Carlo check of the linearisation
    mc_frame = None
    if monte_carlo:
        try:
            mc = unc.monte_carlo(
                model, x, cov, n=_MC_TRIALS, seed=seed, level=level, output_names=outputs
            )
            mc_frame = mc.against_linear(prop.u)
        except PerftestError as exc:
            notes.append(f"Monte Carlo check skipped: {exc}")
        if mc_frame is not None and block is not None and block.monte_carlo is not None:
            mc_frame = pd.concat([mc_frame, block.monte_carlo])

    # ---- corrections table
    corr_rows = []
    for ci, c in enumerate(curves):
        xc = [float(x[pos[var]]) for var in c.variables]
        refs_c = getattr(c, "references", (c.reference,))
        f = float(c(*xc))
        if c.kind == "multiplicative":
            check_factor(plant, ci, f, c.result)
        if bare:
            continue
        measured = (
            float(y0[outputs.index(c.result)])
            if c.result in outputs
            else float(results.loc[c.result, "value"])
        )
        # size of this correction alone: change of the result it makes [SI] and relative
        change = measured / f - measured if c.kind == "multiplicative" else -f
        corr_rows.append(
            dict(
                result=c.result,
                variable=" & ".join(c.variables),
                condition=xc[0] if len(xc) == 1 else tuple(xc),
                reference=refs_c[0] if len(refs_c) == 1 else tuple(refs_c),
                kind=c.kind,
                factor=f,
                change=change,
                relative_change=change / measured if measured else math.nan,
            )
        )
    corrections = (
        empty_frame()
        if bare
        else pd.DataFrame(
            corr_rows,
            columns=[
                "result",
                "variable",
                "condition",
                "reference",
                "kind",
                "factor",
                "change",
                "relative_change",
            ],
        )
    )

    # ---- guarantees
    g_rows = []
    if results.shape[0] == len(outputs):  # the rows of the layout: its units by name
        step(("guarantee units", layout.names), check_guarantee_units, plant, results)
    else:
        check_guarantee_units(plant, results)
    for g in step("guarantees", guarantees_from_plant, plant):
        if g.quantity not in results.index:
            raise _plant_error(
                plant,
                f"[[guarantees]] quantity = {g.quantity!r} is not a result of this plant "
                f"({', '.join(results.index)}).",
                "guarantees",
            )
        if bare:
            continue
        g_rows.append(
            g.judge(float(results.loc[g.quantity, "value"]), float(results.loc[g.quantity, "U95"]))
        )
    guarantees = empty_frame() if bare else pd.DataFrame(g_rows, columns=list(VERDICT_COLUMNS))

    # ---- exergy per unit
    products: dict = {}
    if detail:
        exergy, losses, closure, ex_notes, products = _exergy_analysis(
            rec, **_exergy_terms(needs, results, fuel, rec)
        )
        notes += ex_notes
    else:
        exergy, losses, closure = empty_frame(), {}, None

    if bare:
        inputs = empty_frame()
    else:
        inputs = pd.DataFrame(
            {"value": x, "u": np.sqrt(np.diag(cov)), "role": [roles[n] for n in names]},
            index=pd.Index(names, name="input"),
        )
    if block is not None and not bare:
        # the boiler inputs that are reconciled variables or the heating value (the
        # separate methods' measured inputs stay in the boiler budgets only)
        extra = block.inputs[
            block.inputs["role"].isin(("reconciled", "heating_value"))
            & ~block.inputs.index.isin(inputs.index)
        ]
        inputs = pd.concat([inputs, extra])
    return Performance(
        results=results,
        budgets=budget_tables,
        guarantees=guarantees,
        corrections=corrections,
        exergy=exergy,
        exergy_closure=closure,
        exergy_losses=losses,
        inputs=inputs,
        monte_carlo=mc_frame,
        cov=cov_out,
        level=float(level),
        dead_state=tuple(float(v) for v in rec.dead_state),
        notes=tuple(notes),
        exergy_products=products,
    )


def _corrected_boiler_results(corrected, results, cov_out, x, cov, pos, level):
    """``corrected_<boiler result>`` rows: the block's value corrected to reference.

    The boiler block is propagated on its own (no correlation with the other inputs is
    claimed), so the corrected value's variance is the linear sum of the block's
    variance and the conditions' covariance, weighted by the correction's partial
    derivatives (GUM Eq. 13, the two parts taken as uncorrelated).
    """
    from perftest.evaluation import uncertainty as unc
    from perftest.evaluation.corrections import apply_corrections, correction_sensitivities

    rows, extra = [], {}
    new_cov = {}
    for result, cs in corrected.items():
        value = float(results.loc[result, "value"])
        u_b = float(results.loc[result, "u"])
        variables = list(dict.fromkeys(v for c in cs for v in c.variables))
        conditions = {v: float(x[pos[v]]) for v in variables}
        corrected_value = float(apply_corrections(value, cs, conditions))
        sens = correction_sensitivities(value, cs, conditions)
        g = np.array([float(sens[v]) for v in variables])
        idx = [pos[v] for v in variables]
        c_cond = cov[np.ix_(idx, idx)]
        dv = float(sens["value"])
        var = (dv * u_b) ** 2 + float(g @ c_cond @ g)
        u = math.sqrt(max(var, 0.0))
        dof = float(results.loc[result, "dof"])
        U = float(unc.expanded(u, dof, level))
        name = f"corrected_{result}"
        rows.append(
            {
                "name": name,
                "value": corrected_value,
                "u": u,
                "U95": U,
                "unit": results.loc[result, "unit"],
                "k": U / u if u > 0 else math.nan,
                "dof": dof,
                "description": f"{results.loc[result, 'description']}, corrected to "
                "reference conditions",
                "basis": results.loc[result, "basis"],
            }
        )
        new_cov[name] = (result, dv, var, g, idx)
        budget = pd.DataFrame(
            {
                "estimate": [value, *[conditions[v] for v in variables]],
                "u": [u_b, *[math.sqrt(max(c_cond[i, i], 0.0)) for i in range(len(idx))]],
                "sensitivity": [dv, *g],
            },
            index=pd.Index([result, *variables], name="input"),
        )
        budget["u_contribution"] = (budget["sensitivity"] * budget["u"]).abs()
        total = float((budget["u_contribution"] ** 2).sum())
        budget["share"] = budget["u_contribution"] ** 2 / total if total > 0 else 0.0
        extra[name] = budget
    add = pd.DataFrame(rows).set_index("name")
    add.index.name = results.index.name
    results = pd.concat([results, add[[c for c in results.columns if c in add.columns]]])
    cov_out = cov_out.reindex(index=results.index, columns=results.index, fill_value=0.0)
    for name, (result, dv, var, _, _) in new_cov.items():
        # the block's own part is shared with the uncorrected result
        row = dv * cov_out.loc[result, :].drop(index=name)
        cov_out.loc[name, row.index] = row.to_numpy()
        cov_out.loc[row.index, name] = row.to_numpy()
        cov_out.loc[name, name] = var
    # two corrected results that share a condition share its part as well
    names = list(new_cov)
    for i, a in enumerate(names):
        for b in names[i + 1 :]:
            _, _, _, g_a, idx_a = new_cov[a]
            _, _, _, g_b, idx_b = new_cov[b]
            shared = float(g_a @ cov[np.ix_(idx_a, idx_b)] @ g_b)
            cov_out.loc[a, b] += shared
            cov_out.loc[b, a] += shared
    return results, cov_out, extra


def _compute(key, compute, *args):
    """A step without a memo: ``compute(*args)``."""
    return compute(*args)


def _results_layout(outputs: list, kind: str, basis: str) -> ResultsLayout:
    """Rows of the results table: units, descriptions and bases of ``outputs``."""
    bases = [
        basis if o.removeprefix("corrected_") in kinds.HEATING_VALUE_RESULTS else ""
        for o in outputs
    ]
    layout = ResultsLayout(
        outputs,
        [_unit_of(o) for o in outputs],
        [
            kinds.describe(o, kind) + (f" ({b.upper()})" if b else "")
            for o, b in zip(outputs, bases, strict=True)
        ],
        bases,
    )
    return layout


def _unit_of(name: str) -> str:
    return RESULT_UNITS.get(name.removeprefix("corrected_"), "")


def _describe(name: str) -> str:
    return kinds.describe(name)


def _with_heat_balance(rec, needs, results: pd.DataFrame, notes: list, level: float):
    """Append the raw-measurement heat-balance closure of a chiller to ``results``."""
    from perftest.evaluation.heat_balance import raw_heat_balance

    try:
        hb = raw_heat_balance(
            rec,
            {k: needs.refs[k] for k in ("cooling", "power_input", "heat_rejected")},
            level=level,
        )
    except PerftestError as exc:
        notes.append(f"Heat-balance closure of the raw measurements not computed: {exc}")
        return results, None
    if hb is None:
        return results, None
    notes += hb["notes"]
    row = pd.DataFrame(
        {
            "value": [hb["value"]],
            "u": [hb["u"]],
            "U95": [hb["U95"]],
            "unit": ["1"],
            "k": [hb["U95"] / hb["u"] if hb["u"] > 0 else math.nan],
            "dof": [hb["dof"]],
            "description": [_describe("heat_balance_closure")],
            "basis": [""],
        },
        index=pd.Index(["heat_balance_closure"], name="name"),
    )
    t = hb["terms"]
    notes.append(
        "Heat balance of the raw measurements: cooling "
        f"{t['cooling'] / 1e3:.1f} kW + power {t['power_input'] / 1e3:.1f} kW - heat rejected "
        f"{t['heat_rejected'] / 1e3:.1f} kW = {hb['value'] * 100:+.2f} % of the heat rejected "
        f"(U95 {hb['U95'] * 100:.2f} %)."
    )
    return pd.concat([results, row]), hb["u"] ** 2


def _exergy_terms(needs, results: pd.DataFrame, fuel, rec) -> dict:
    """Arguments of the exergy account for the plant's kind."""

    def val(name):
        return float(results.loc[name, "value"]) if name in results.index else math.nan

    if needs.kind in ("power", "chp"):
        terms = dict(
            fuel_exergy=val("fuel_exergy") if fuel is not None else math.nan,
            net_power=val("net_power"),
            aux_power=val("auxiliary_power"),
        )
        if needs.kind == "chp":
            terms["products"] = tuple(s for k in needs.export for s in needs.export[k])
        return terms
    if needs.kind == "boiler":
        # the product is the exergy the water and steam take up (every stream of the
        # model crosses the boundary of a stand-alone boiler)
        spec = rec.model.spec if getattr(rec, "model", None) is not None else None
        return dict(
            fuel_exergy=val("heat_input") * fuel["ratio"],
            net_power=0.0,
            aux_power=0.0,
            products=tuple(spec.streams) if spec is not None else (),
            product_label="steam",
        )
    p = val("power_input")
    terms = dict(fuel_exergy=math.nan, net_power=0.0, aux_power=p, supplied=p)
    spec = rec.model.spec if getattr(rec, "model", None) is not None else None
    if needs.kind == "refrigeration" and spec is not None:
        coolant = {
            s
            for u in spec.units.values()
            if u.type == "condenser"
            for key in ("coolant_inlet", "coolant_outlet")
            for s in u.ports.get(key, ())
        }
        terms["products"] = tuple(s for s in spec.streams if s not in coolant)
        terms["product_label"] = "cooling"
    else:
        terms["coolant_is_product"] = "heating"
    return terms
