"""Boiler efficiency by the input-output and the heat-loss methods, and reconciled.

Three estimates of one efficiency, each with its uncertainty and budget, on the
heating-value basis of ``[performance] basis``:

* ``boiler_efficiency_direct`` — input-output: :math:`\\eta_D = \\dot Q / (\\dot m_f k H)`
  with the useful heat :math:`\\dot Q` from the water/steam side reconciled **without**
  the combustion rows and the fuel flow as measured;
* ``boiler_efficiency_indirect`` — heat-loss: :math:`\\eta_L = 1 - \\sum L` from the
  flue-gas analysis, temperatures and air humidity as measured
  (:func:`perftest.thermo.heat_loss.boiler_losses`), each loss a result of its own,
  with ``excess_air``;
* ``boiler_efficiency`` — the input-output efficiency at the values reconciled
  **with** the combustion rows (:mod:`perftest.plant.combustion`), where it equals
  the heat-loss efficiency at the reconciled flue-gas values.

The two methods share only the fuel analysis (heating value and composition), so
they are reconciled against each other in the plant model, and the gross-error tests
see the fuel meter and the flue-gas analysers like any other instrument.

Uncertainty
-----------
The direct and indirect efficiencies are propagated linearly (GUM clause 5.1, [1]_)
from the measured values and the uncoupled reconciliation, the heating value (its
stated uncertainty) and the given losses (radiation, other; their stated or default
uncertainty).  The heating value and the given losses are parameters of the
combustion rows, not measurements, so the reconciliation holds them fixed; their
effect on the reconciled efficiency is found by reconciling again with each
parameter moved (a forward difference of the whole reconciliation) and added to the
reconciled covariance of the useful heat and fuel flow.  The covariance between the
reconciled and the two separate estimates is carried only through these shared
parameters.

References
----------
.. [1] JCGM 100:2008 (GUM), clauses 5.1-5.2.
.. [2] JCGM 101:2008 (GUM Supplement 1), Monte Carlo propagation.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from perftest.errors import PerftestError

__all__ = ["BoilerBlock", "boiler_results", "BOILER_UNITS", "BOILER_DESCRIPTIONS"]

LOSSES = (
    ("dry_flue_gas_loss", "dry_flue_gas", "Dry flue-gas loss"),
    ("hydrogen_moisture_loss", "hydrogen_moisture", "Loss by water from the fuel's hydrogen"),
    ("fuel_moisture_loss", "fuel_moisture", "Loss by the fuel's moisture"),
    ("air_moisture_loss", "air_moisture", "Loss by the combustion air's moisture"),
    ("unburned_co_loss", "unburned_co", "Unburned-gas (CO) loss"),
    ("radiation_loss", "radiation", "Radiation and convection loss (given)"),
    ("other_losses", "other", "Other losses (given)"),
)
#: SI unit of every boiler result.
BOILER_UNITS = {
    "boiler_efficiency_direct": "1",
    "boiler_efficiency_indirect": "1",
    "boiler_efficiency": "1",
    "excess_air": "1",
    **{name: "1" for name, _, _ in LOSSES},
}
BOILER_DESCRIPTIONS = {
    "boiler_efficiency_direct": "Boiler efficiency, input-output method (measured)",
    "boiler_efficiency_indirect": "Boiler efficiency, heat-loss method (measured)",
    "boiler_efficiency": "Boiler efficiency, both methods reconciled",
    "excess_air": "Excess air (from the flue-gas analysis)",
    **{name: text for name, _, text in LOSSES},
}
#: Results that are fractions of the fuel's heating value (they state its basis).
HEATING_VALUE_RESULTS = tuple(n for n in BOILER_UNITS if n != "excess_air")

# Monte Carlo trials of the boiler check.  The heat-loss functions take one point at
# a time (about 0.1 ms each), so the check uses fewer trials than the plant's main
# Monte Carlo: 4000 trials resolve a standard uncertainty to about 1.1 %
# (1/sqrt(2M)), enough to see a failing linearisation.
MC_TRIALS = 4000
# Steps of the re-reconciliation that finds the reconciled efficiency's sensitivity
# to the heating value (relative) and to the given losses (absolute fractions): large
# enough against the solver's convergence tolerance, small enough that the response
# is linear (the efficiency is smooth in both).
_H_STEP = 1e-3
_LOSS_STEP = 1e-3


@dataclass(frozen=True)
class BoilerBlock:
    """Boiler results to join the plant's :class:`~perftest.evaluation.results.Performance`.

    ``results`` has the columns of ``Performance.results``; ``budgets`` one table per
    result; ``monte_carlo`` the check per result (or None); ``cov`` the results'
    covariance; ``inputs`` the inputs (``value, u, role``); ``notes`` text.
    """

    results: pd.DataFrame
    budgets: dict
    monte_carlo: pd.DataFrame | None
    cov: pd.DataFrame
    inputs: pd.DataFrame
    notes: tuple


def _quiet_reconcile(plant, measurements, start):
    from perftest.balance.plant import reconcile

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return reconcile(plant, measurements, start=start)


def _uncoupled(plant, rec):
    """The reconciliation of the same measurements without the combustion rows."""
    from perftest.plant.combustion import FLUE_KEYS

    perf = {k: v for k, v in plant.sections["performance"].items() if k not in FLUE_KEYS}
    p2 = dataclasses.replace(plant, sections={**plant.sections, "performance": perf})
    return _quiet_reconcile(p2, rec.measurements, None)


def _moved(plant, rec, comb):
    """The reconciliation with other firing-side parameters (same instruments dropped)."""
    from perftest.plant.equations import build_model

    p2 = dataclasses.replace(plant)
    object.__setattr__(p2, "_perftest_model", build_model(plant).with_combustion(comb))
    meas = rec.measurements
    drop = set(rec.eliminated_tags)
    if drop:
        meas = meas.subset([t for t in meas.tags if t not in drop])
    return _quiet_reconcile(p2, meas, rec)


def _reconciled_efficiency(r, comb) -> float:
    q = sum(r.value(n) for n in comb.useful_heat)
    m = r.value("combustion.fuel_flow")
    return q / (comb.flow_factor * m * comb.heating_value)


def boiler_results(plant, rec, hv_u_rel: float, *, level=0.95, monte_carlo=True, seed=0):
    """The boiler results of a reconciled plant whose model has a firing side.

    Parameters
    ----------
    plant : Plant
    rec : PlantReconciliation
        From :func:`perftest.reconcile`; its model carries the combustion rows.
    hv_u_rel : float [-]
        Relative standard uncertainty of the heating value.
    level : float
        Coverage probability of ``U95``.
    monte_carlo : bool
        Also propagate by Monte Carlo (check of the linearisation).
    seed : int

    Returns
    -------
    BoilerBlock or None
        None when the model has no firing side.
    """
    from perftest.evaluation import uncertainty as unc
    from perftest.plant.combustion import humidity_ratio

    comb = getattr(rec.model, "combustion", None)
    if comb is None:
        return None
    if not hasattr(rec, "measurements"):
        return _as_measured(rec, comb, hv_u_rel, level)
    notes = list(comb.notes)
    unc_rec = _uncoupled(plant, rec)
    fuel_tag = comb.sources["fuel_flow"].tag
    flue = comb.inputs  # firing-side variables of the loss functions

    # ---- inputs: (name, value, role); covariance blocks
    names, x, roles = [], [], []

    def add(name, value, role):
        names.append(name)
        x.append(float(value))
        roles.append(role)

    # separate methods: measured values (the uncoupled reconciliation carries the
    # firing side's tags unchanged and reconciles the water/steam side alone)
    sep = list(comb.useful_refs)
    fuel_ref = fuel_tag
    if fuel_ref is not None:
        sep.append(fuel_ref)
    flue_refs = {}
    for var in flue:
        src = comb.sources[var]
        if src.kind == "measured" and src.tag in rec.measurements:
            flue_refs[var] = src.tag
            sep.append(src.tag)
    sep = list(dict.fromkeys(sep))
    for n in sep:
        add(f"measured:{n}", unc_rec.value(n), "measured")
    cov_sep = np.asarray(unc_rec.covariance(sep), dtype=float)
    # reconciled side
    fuel_name = fuel_tag or "combustion.fuel_flow"  # the reconciled fuel flow
    coupled = [*comb.useful_heat, fuel_name]
    for n in coupled:
        add(n, rec.value(n), "reconciled")
    cov_rec = np.asarray(rec.covariance(coupled), dtype=float)
    # parameters: heating value, given losses
    H = comb.heating_value
    hv_name = f"fuel.{comb.basis}"
    add(hv_name, H, "heating_value")
    params = [(hv_name, H * hv_u_rel)]
    for name in ("radiation", "other"):
        if comb.given[name] or comb.loss_u[name]:
            add(f"given:{name}", comb.given[name], "given loss")
            params.append((f"given:{name}", comb.loss_u[name]))
        if comb.absolute[name] or comb.loss_u[f"{name}_watts"]:
            add(f"given:{name}_watts", comb.absolute[name], "given loss")
            params.append((f"given:{name}_watts", comb.loss_u[f"{name}_watts"]))
    x = np.asarray(x, dtype=float)
    n_in = len(names)
    cov = np.zeros((n_in, n_in))
    ns, nr = len(sep), len(coupled)
    cov[:ns, :ns] = cov_sep
    cov[ns : ns + nr, ns : ns + nr] = cov_rec
    for i, (_, u) in enumerate(params):
        cov[ns + nr + i, ns + nr + i] = u * u
    if not np.all(np.isfinite(cov)):
        raise PerftestError(
            "The boiler efficiencies need the useful heat, the fuel flow and the flue-gas "
            "values to be observable; one of them is not (see the reconciliation's "
            "unmeasured variables)."
        )
    pos = {n: i for i, n in enumerate(names)}

    # ---- the reconciled efficiency's sensitivity to each parameter
    eta_rec0 = _reconciled_efficiency(rec, comb)
    sens = {}
    for pname, _ in params:
        if pname == hv_name:
            step = _H_STEP * H
            moved = comb.with_parameters(heating_value=H + step)
        else:
            key = pname.split(":", 1)[1]
            if key.endswith("_watts"):
                base = key.removesuffix("_watts")
                step = _LOSS_STEP * H * comb.flow_factor * rec.value("combustion.fuel_flow")
                moved = comb.with_parameters(
                    absolute={**comb.absolute, base: comb.absolute[base] + step}
                )
            else:
                step = _LOSS_STEP
                moved = comb.with_parameters(given={**comb.given, key: comb.given[key] + step})
        try:
            r2 = _moved(plant, rec, moved)
            eta_2 = _reconciled_efficiency(r2, moved)
        except PerftestError as exc:
            raise PerftestError(
                f"The sensitivity of the reconciled boiler efficiency to {pname} could not "
                f"be found (the reconciliation with it moved failed: {exc})."
            ) from None
        # the whole change of the reconciled efficiency: the formula of the
        # propagation below holds H at its estimate
        sens[pname] = (eta_2 - eta_rec0) / step

    def humidity(Ta, rh):
        return humidity_ratio(Ta, comb.pressure, rh)

    from perftest.thermo.heat_loss import boiler_losses

    outputs = [
        "boiler_efficiency_direct",
        "boiler_efficiency_indirect",
        "boiler_efficiency",
        "excess_air",
        *(n for n, _, _ in LOSSES),
    ]

    def model(v):
        z = {}
        for var in flue:
            z[var] = (
                v[pos[f"measured:{flue_refs[var]}"]]
                if var in flue_refs
                else (comb.sources[var].value)
            )
        hv = v[pos[hv_name]]
        q_sep = sum(v[pos[f"measured:{r}"]] for r in comb.useful_refs)
        m_sep = v[pos[f"measured:{fuel_ref}"]]
        heat_in = comb.flow_factor * m_sep * hv
        given = {
            k: v[pos[f"given:{k}"]] if f"given:{k}" in pos else comb.given[k]
            for k in ("radiation", "other")
        }
        watts = {
            k: v[pos[f"given:{k}_watts"]] if f"given:{k}_watts" in pos else comb.absolute[k]
            for k in ("radiation", "other")
        }
        Ta = z["air_temperature"]
        rh = z.get("air_relative_humidity", 0.0)
        analysis = (
            {"oxygen": z["oxygen"]} if "oxygen" in z else {"carbon_dioxide": z["carbon_dioxide"]}
        )
        bl = boiler_losses(
            comb.fuel,
            heating_value=hv,
            heating_value_basis=comb.basis,
            flue_gas_temperature=z["flue_gas_temperature"],
            air_temperature=Ta,
            carbon_monoxide=z.get("carbon_monoxide", 0.0),
            flue_gas_basis=comb.flue_gas_basis,
            air_humidity_ratio=humidity(Ta, rh),
            pressure=comb.pressure,
            **analysis,
        )
        # the given losses are added here, so that a Monte Carlo trial may move them
        # below zero without tripping the library's range check
        rad = given["radiation"] + watts["radiation"] / heat_in
        oth = given["other"] + watts["other"] / heat_in
        eta_ind = bl.efficiency - rad - oth
        q_rec = sum(v[pos[n]] for n in comb.useful_heat)
        m_rec = v[pos[fuel_name]]
        eta_rec = q_rec / (comb.flow_factor * m_rec * H)
        for pname, _ in params:
            eta_rec = eta_rec + sens[pname] * (v[pos[pname]] - x[pos[pname]])
        return np.array(
            [
                q_sep / heat_in,
                eta_ind,
                eta_rec,
                bl.excess_air,
                bl.dry_flue_gas,
                bl.hydrogen_moisture,
                bl.fuel_moisture,
                bl.air_moisture,
                bl.unburned_co,
                rad,
                oth,
            ]
        )

    prop = unc.propagate(model, x, cov, names=names, output_names=outputs, level=level)
    basis = comb.basis
    results = prop.results_table(
        [BOILER_UNITS[o] for o in outputs],
        [
            BOILER_DESCRIPTIONS[o] + (f" ({basis.upper()})" if o in HEATING_VALUE_RESULTS else "")
            for o in outputs
        ],
        [basis if o in HEATING_VALUE_RESULTS else "" for o in outputs],
    )
    budgets = {}
    for o in outputs:
        b = prop.budget_for(o)[["estimate", "u", "sensitivity", "u_contribution", "share"]]
        budgets[o] = b[b["sensitivity"] != 0].copy()
    mc_frame = None
    if monte_carlo:
        try:
            mc = unc.monte_carlo(
                model, x, cov, n=MC_TRIALS, seed=seed, level=level, vectorized=False,
                output_names=outputs,
            )  # fmt: skip
            mc_frame = mc.against_linear(prop.u)
        except PerftestError as exc:
            notes.append(f"Monte Carlo check of the boiler results skipped: {exc}")
    d, i_, r_ = (results.loc[n] for n in outputs[:3])
    gap = float(d["value"] - i_["value"])
    u_gap = math.sqrt(float(d["u"]) ** 2 + float(i_["u"]) ** 2)
    notes.append(
        f"Boiler efficiency ({basis.upper()}): input-output {100 * d['value']:.2f} %, heat-loss "
        f"{100 * i_['value']:.2f} %, reconciled {100 * r_['value']:.2f} % (U95 "
        f"{100 * r_['U95']:.2f} %); the two methods differ by {100 * gap:+.2f} points, "
        f"{abs(gap) / u_gap:.1f} standard uncertainties of the difference."
    )
    notes.append(
        "Heating value and given losses are held fixed inside the reconciliation; their "
        "uncertainty enters the reconciled boiler efficiency through its sensitivity found "
        "by reconciling again with each moved."
    )
    inputs = pd.DataFrame(
        {"value": x, "u": np.sqrt(np.diag(cov)), "role": roles},
        index=pd.Index(names, name="input"),
    )
    cov_out = pd.DataFrame(prop.cov, index=outputs, columns=outputs)
    return BoilerBlock(results, budgets, mc_frame, cov_out, inputs, tuple(notes))


def _as_measured(view, comb, hv_u_rel: float, level: float) -> BoilerBlock:
    """The boiler efficiency without reconciliation (a planning view: ``value`` and
    ``covariance`` of the plain calculation): the input-output efficiency."""
    from perftest.evaluation import uncertainty as unc

    # the fuel meter's tag: read as measured by the planning view
    names = [*comb.useful_heat, comb.sources["fuel_flow"].tag or "combustion.fuel_flow"]
    x = [view.value(n) for n in names]
    cov = np.zeros((len(names) + 1, len(names) + 1))
    cov[:-1, :-1] = np.asarray(view.covariance(names), dtype=float)
    H = comb.heating_value
    cov[-1, -1] = (H * hv_u_rel) ** 2
    names.append(f"fuel.{comb.basis}")
    x = np.asarray([*x, H], dtype=float)
    k = len(comb.useful_heat)

    def model(v):
        return np.array([sum(v[:k]) / (comb.flow_factor * v[k] * v[k + 1])])

    prop = unc.propagate(model, x, cov, names=names, output_names=["boiler_efficiency"],
                         level=level)  # fmt: skip
    results = prop.results_table(["1"], [BOILER_DESCRIPTIONS["boiler_efficiency"]], [comb.basis])
    b = prop.budget_for("boiler_efficiency")[
        ["estimate", "u", "sensitivity", "u_contribution", "share"]
    ]
    inputs = pd.DataFrame(
        {"value": x, "u": np.sqrt(np.diag(cov)),
         "role": ["reconciled"] * (len(names) - 1) + ["heating_value"]},
        index=pd.Index(names, name="input"),
    )  # fmt: skip
    cov_out = pd.DataFrame(prop.cov, index=["boiler_efficiency"], columns=["boiler_efficiency"])
    return BoilerBlock(results, {"boiler_efficiency": b}, None, cov_out, inputs, ())
