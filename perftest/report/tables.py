"""Report tables: DataFrames in display units.

Inside perftest every number is SI; these functions convert to the units an
engineer reads: each tag in the unit it was logged in, powers in MW, efficiencies
in %, heat rate in kJ/kWh (and Btu/kWh), temperatures in degC.  Uncertainties and
deviations are converted as intervals (no offset, no gauge shift).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from perftest import display as D
from perftest.report.data import ReportData

__all__ = [
    "to_display",
    "result_display",
    "measurements_table",
    "stability_table",
    "exclusions_table",
    "reconciliation_table",
    "results_table",
    "budget_table",
    "guarantees_table",
    "exergy_table",
    "closure_table",
    "corrections_table",
    "conditions_table",
    "monte_carlo_table",
    "budget_results",
    "input_display",
    "timings_table",
    "spreadsheet_safe",
    "write_csv",
]

# kJ in one International Table Btu (exact; NIST SP 811, Appendix B).
_BTU_KJ = 1.05505585262


def to_display(
    values,
    unit: str | None,
    *,
    atmospheric_pressure=None,
    difference=False,
    quantity: str | None = None,
    density=None,
):
    """Convert SI values to a tag's display unit.

    Parameters
    ----------
    values : float or array [SI]
    unit : str or None
        Display unit (as logged).  ``None``: the quantity's engineering unit.
    atmospheric_pressure : float, optional [Pa]
        For gauge units.
    difference : bool
        Convert as an interval (uncertainty, deviation).
    quantity : str, optional
        Glossary quantity of the SI values.
    density : float, optional [kg/m3]
        For a volume-flow unit of a tag whose SI value is a mass flow.

    Returns
    -------
    (ndarray, str)
        Converted values and the unit they are really in: when the display unit
        cannot be used (a gauge unit without atmospheric pressure, a volume unit
        without density) both fall back together (see :func:`perftest.display.convert`).
    """
    return D.convert(
        values,
        unit,
        quantity=quantity,
        atmospheric_pressure=atmospheric_pressure,
        density=density,
        difference=difference,
    )


def result_display(name: str, si_unit: str, value=None):
    """(display unit, scale, offset) of a result (:func:`perftest.display.result_unit`)."""
    return D.result_unit(name, si_unit, value)


def _tag_unit(data: ReportData, tag: str) -> str | None:
    return data.units.get(tag)


def _tag_quantity(data: ReportData, tag: str, fallback: str | None = None) -> str | None:
    return data.quantities.get(tag) or fallback or None


def _shown(data: ReportData, tag: str, quantity, values: dict, intervals: dict) -> tuple:
    """Values (absolute) and intervals of one tag in one unit; returns (dict, unit)."""
    unit = _tag_unit(data, tag)
    q = _tag_quantity(data, tag, quantity)
    rho = data.densities.get(tag)
    out = {}
    shown = None
    for k, v in values.items():
        conv, u = to_display(
            v, unit, quantity=q, atmospheric_pressure=data.atmospheric_pressure, density=rho
        )
        shown = u if shown is None else shown
        out[k] = float(conv)
    for k, v in intervals.items():
        conv, u = to_display(v, shown or unit, quantity=q, difference=True, density=rho)
        out[k] = float(conv)
    return out, shown or ""


def measurements_table(data: ReportData) -> pd.DataFrame:
    """Averaged measurements in display units.

    Columns ``tag, quantity, mean, u_random, u_systematic, u, U95, unit, dof,
    n_samples, n_excluded``; ``U95 = k u`` with the Student t factor of the tag's
    degrees of freedom at 95 % (1.96 for infinite dof; the reconciliation and the
    results use the covariance itself, not this column).
    """
    m = data.measurements
    if m.empty:
        return pd.DataFrame()
    rows = []
    for r in m.itertuples(index=False):
        vals, shown = _shown(
            data,
            r.tag,
            r.quantity,
            {"mean": r.value},
            {"u_random": r.u_random, "u_systematic": r.u_systematic, "u": r.u},
        )
        rows.append(
            dict(
                tag=r.tag,
                quantity=r.quantity,
                mean=vals["mean"],
                u_random=vals["u_random"],
                u_systematic=vals["u_systematic"],
                u=vals["u"],
                U95=_k95(r.dof) * vals["u"],
                unit=shown,
                dof=float(r.dof),
                n_samples=int(r.n_samples),
                n_excluded=int(r.n_excluded),
            )
        )
    return pd.DataFrame(rows)


def _k95(dof) -> float:
    """Coverage factor for 95 % from the Student t distribution (GUM G.3)."""
    return D.k95(dof)


def stability_table(data: ReportData) -> pd.DataFrame:
    """Stability of each tag over the window, deviations in display units.

    Columns ``tag, mean, max_deviation, drift, permissible, unit, ratio, passed``.
    """
    s = data.stability
    if s.empty:
        return pd.DataFrame()
    rows = []
    for tag, r in s.iterrows():
        vals, shown = _shown(
            data,
            tag,
            r.get("quantity"),
            {"mean": r.get("mean", np.nan)},
            {c: r.get(c, np.nan) for c in ("max_deviation", "drift", "permissible")},
        )
        passed = r.get("passed", pd.NA)
        rows.append(
            dict(
                tag=tag,
                **vals,
                unit=shown,
                ratio=float(r.get("ratio", np.nan)),
                passed=None if passed is pd.NA or passed is None else bool(passed),
            )
        )
    return pd.DataFrame(rows)


def exclusions_table(data: ReportData) -> pd.DataFrame:
    """Excluded samples grouped by tag and reason: ``tag, reason, count, first, last``."""
    e = data.exclusions
    if e.empty or not {"tag", "reason"} <= set(e.columns):
        return pd.DataFrame(columns=["tag", "reason", "count", "first", "last"])
    g = e.groupby(["tag", "reason"], sort=True)
    out = g.size().rename("count").to_frame()
    if "time" in e.columns:
        out["first"] = g["time"].min().astype(str)
        out["last"] = g["time"].max().astype(str)
    return out.reset_index()


def reconciliation_table(data: ReportData) -> pd.DataFrame:
    """Measured against reconciled values in display units.

    Columns ``tag, unit, measured, u_measured, reconciled, u_reconciled,
    adjustment, z, redundant, suspect, eliminated``.
    """
    r = data.reconciliation
    if r.empty:
        return pd.DataFrame()
    rows = []
    for row in r.itertuples(index=False):
        vals, shown = _shown(
            data,
            row.tag,
            getattr(row, "quantity", None),
            {"measured": row.measured, "reconciled": row.reconciled},
            {
                "u_measured": row.u_measured,
                "u_reconciled": row.u_reconciled,
                "adjustment": row.reconciled - row.measured,
            },
        )
        rows.append(
            dict(
                tag=row.tag,
                unit=shown,
                measured=vals["measured"],
                u_measured=vals["u_measured"],
                reconciled=vals["reconciled"],
                u_reconciled=vals["u_reconciled"],
                adjustment=vals["adjustment"],
                z=float(row.z),
                redundant=bool(getattr(row, "redundant", False)),
                suspect=bool(row.suspect),
                eliminated=bool(getattr(row, "eliminated", False)),
            )
        )
    return pd.DataFrame(rows)


def results_table(data: ReportData, *, btu: bool = True) -> pd.DataFrame:
    """Results with uncertainty in display units.

    Columns ``name, description, value, u, U95, unit``; heat rates get a second
    row in Btu/kWh when ``btu``.  Units by result (any plant kind): powers and
    heat flows in MW (kW below 1 MW), fractions in %, COP and ratios plain,
    heat rates in kJ/kWh, temperatures in °C.
    """
    res = data.results
    if res.empty:
        return pd.DataFrame()
    rows = []
    for name, r in res.iterrows():
        unit, scale, offset = result_display(name, r["unit"], r["value"])
        rows.append(
            dict(
                name=name,
                description=r.get("description", ""),
                value=r["value"] * scale + offset,
                u=r["u"] * abs(scale),
                U95=r["U95"] * abs(scale),
                unit=unit,
            )
        )
        if btu and r["unit"] == "J/J":
            f = 3600.0 / _BTU_KJ
            rows.append(
                dict(
                    name=name,
                    description=r.get("description", ""),
                    value=r["value"] * f,
                    u=r["u"] * f,
                    U95=r["U95"] * f,
                    unit="Btu/kWh",
                )
            )
    return pd.DataFrame(rows)


# Glossary quantity of a model variable by its suffix ("stream.temperature").
_VARIABLE_QUANTITY = {
    "temperature": "temperature",
    "pressure": "pressure",
    "mass_flow": "mass_flow",
    "enthalpy": "specific_enthalpy",
    "entropy": "specific_entropy",
    "exergy": "specific_exergy",
    "exergy_flow": "power",
    "power": "power",
    "heat": "heat_flow",
    "heat_loss": "heat_flow",
    "lhv": "specific_energy",
    "hhv": "specific_energy",
}


def input_display(data: ReportData, name: str):
    """(unit, quantity) to show a budget input or correction variable in.

    A tag is shown in its logged unit; a model variable (``stream.var``) in the
    engineering unit of its quantity.
    """
    name = str(name)
    if name in data.units:
        return data.units.get(name), data.quantities.get(name)
    q = _VARIABLE_QUANTITY.get(name.rsplit(".", 1)[-1])
    if q is None and name in data.quantities:
        q = data.quantities[name]
    return D.engineering_unit(q), q


def _input_values(data: ReportData, name: str, value, interval):
    """An input's value and interval in its display unit: (value, interval, unit, d/dSI)."""
    unit, q = input_display(data, name)
    rho = data.densities.get(name)
    v, shown = to_display(
        value, unit, quantity=q, atmospheric_pressure=data.atmospheric_pressure, density=rho
    )
    if not shown:
        return float(value), float(interval), "", 1.0
    du, _ = to_display(interval, shown, quantity=q, difference=True, density=rho)
    one, _ = to_display(1.0, shown, quantity=q, difference=True, density=rho)
    return float(v), float(du), shown, float(one)


def budget_table(data: ReportData, name: str, top: int | None = None) -> pd.DataFrame:
    """Uncertainty budget of one result in engineering units.

    Columns ``input, estimate, u, unit, sensitivity, u_contribution, share``:
    estimate and u in the input's display unit, the sensitivity in result unit
    per input unit, the contribution in the result's display unit
    (``attrs["unit"]``) and the share of the variance in %.  Sorted by share,
    largest first.
    """
    b = data.budgets.get(name)
    if b is None or b.empty:
        return pd.DataFrame()
    si = data.results.loc[name, "unit"] if name in data.results.index else ""
    value = data.results.loc[name, "value"] if name in data.results.index else None
    unit, scale, _ = result_display(name, si, value)
    out = b.reset_index().rename(columns={"index": "input"})
    if "input" not in out.columns:
        out = out.rename(columns={out.columns[0]: "input"})
    rows = []
    for r in out.itertuples(index=False):
        est, u, shown, per = _input_values(data, r.input, r.estimate, r.u)
        rows.append(
            dict(
                input=r.input,
                estimate=est,
                u=u,
                unit=shown,
                sensitivity=float(r.sensitivity) * abs(scale) / per if per else math.nan,
                u_contribution=float(r.u_contribution) * abs(scale),
                share=float(r.share) * 100.0,
            )
        )
    table = pd.DataFrame(rows)
    table = table.sort_values("share", ascending=False, key=lambda s: s.abs())
    table = table.reset_index(drop=True)
    table.attrs["unit"] = unit
    return table.head(top) if top else table


def budget_results(data: ReportData) -> list:
    """Results that get a budget table: the headline results and every guaranteed one."""
    names = ["first_law_efficiency", "heat_rate", "cop", "fuel_utilisation"]
    names += ["boiler_efficiency_direct", "boiler_efficiency_indirect", "boiler_efficiency"]
    for g in data.guarantees.get("quantity", pd.Series(dtype=str)).tolist():
        names.append(str(g))
    out = []
    for n in names:
        if n in data.budgets and n not in out:
            out.append(n)
    return out


def guarantees_table(data: ReportData) -> pd.DataFrame:
    """Guarantee verdicts in the guarantee's own unit.

    Columns ``quantity, corrected_value, U95, guaranteed, unit, direction, verdict,
    rule``; without a unit in the plant file the result's display unit is used.
    """
    g = data.guarantees
    if g.empty:
        return pd.DataFrame()
    from perftest import units as _u
    from perftest.errors import PerftestError

    rows = []
    for r in g.itertuples(index=False):
        unit = getattr(r, "unit", "") or ""
        vals = [r.corrected_value, r.U95, r.guaranteed]
        converted = None
        if unit:
            try:
                converted = [
                    float(_u.from_si(vals[0], unit)),
                    float(_u.from_si(vals[1], unit, difference=True)),
                    float(_u.from_si(vals[2], unit)),
                ]
            except PerftestError:
                converted = None
        if converted is None:
            si = data.results.loc[r.quantity, "unit"] if r.quantity in data.results.index else ""
            unit, scale, off = result_display(r.quantity, si, vals[0])
            converted = [vals[0] * scale + off, vals[1] * abs(scale), vals[2] * scale + off]
        rows.append(
            dict(
                quantity=r.quantity,
                corrected_value=converted[0],
                U95=converted[1],
                guaranteed=converted[2],
                unit=unit,
                direction=r.direction.replace("_", " "),
                verdict=r.verdict,
                rule=getattr(r, "rule", "guarded"),
            )
        )
    return pd.DataFrame(rows)


def _variables(var) -> list:
    return [v.strip() for v in str(var).split("&")]


def corrections_table(data: ReportData) -> pd.DataFrame:
    """Corrections in engineering units.

    Columns ``result, variable, condition, reference, unit, kind, factor, change,
    change_unit, relative_change``: test condition and reference in the variable's
    display unit, ``change`` (what this correction alone changes the result by) in
    the result's display unit, ``relative_change`` in %.
    """
    c = data.corrections
    if c.empty:
        return pd.DataFrame()
    rows = []
    for r in c.itertuples(index=False):
        names = _variables(r.variable)
        conds = r.condition if isinstance(r.condition, tuple) else (r.condition,)
        refs = r.reference if isinstance(r.reference, tuple) else (r.reference,)
        cond_txt, ref_txt, units = [], [], []
        for n, cv, rv in zip(names, conds, refs, strict=False):
            cvd, _, shown, _ = _input_values(data, n, cv, 0.0)
            rvd, _, _, _ = _input_values(data, n, rv, 0.0)
            cond_txt.append(cvd)
            ref_txt.append(rvd)
            units.append(shown)
        res = r.result
        si = data.results.loc[res, "unit"] if res in data.results.index else ""
        value = data.results.loc[res, "value"] if res in data.results.index else None
        runit, scale, _ = result_display(res, si, value)
        rows.append(
            dict(
                result=res,
                variable=r.variable,
                condition=cond_txt[0] if len(cond_txt) == 1 else tuple(cond_txt),
                reference=ref_txt[0] if len(ref_txt) == 1 else tuple(ref_txt),
                unit=units[0] if len(set(units)) == 1 else " & ".join(units),
                kind=r.kind,
                factor=float(r.factor),
                change=float(r.change) * abs(scale),
                change_unit=runit,
                relative_change=float(r.relative_change) * 100.0,
            )
        )
    return pd.DataFrame(rows)


def conditions_table(data: ReportData) -> pd.DataFrame:
    """Test conditions against the reference conditions of the corrections.

    One row per corrected variable: ``variable, test, U95, reference, deviation,
    unit`` in the variable's display unit (U95 from the reconciled input, nan
    when the evaluation does not list it).
    """
    c = data.corrections
    if c.empty:
        return pd.DataFrame()
    seen: dict = {}
    for r in c.itertuples(index=False):
        names = _variables(r.variable)
        conds = r.condition if isinstance(r.condition, tuple) else (r.condition,)
        refs = r.reference if isinstance(r.reference, tuple) else (r.reference,)
        for n, cv, rv in zip(names, conds, refs, strict=False):
            seen.setdefault(n, (float(cv), float(rv)))
    rows = []
    inputs = data.inputs
    for n, (cv, rv) in seen.items():
        u = math.nan
        if not inputs.empty and n in inputs.index and "u" in inputs.columns:
            u = float(inputs.loc[n, "u"]) * 1.959963984540054
        test, U, shown, _ = _input_values(data, n, cv, u)
        ref, _, _, _ = _input_values(data, n, rv, 0.0)
        rows.append(
            dict(variable=n, test=test, U95=U, reference=ref, deviation=test - ref, unit=shown)
        )
    return pd.DataFrame(rows)


def monte_carlo_table(data: ReportData) -> pd.DataFrame:
    """Monte Carlo check of the linear propagation, in display units.

    Columns ``name, unit, value, u, low, high, u_linear, ratio, linear_low,
    linear_high, end_difference``: ``low``-``high`` is the Monte Carlo coverage
    interval (at the evaluation's coverage level), ``linear_low``-``linear_high`` the
    linear ``y ± U95``, and ``end_difference`` the larger difference of their ends in %
    of U95 (the comparison of JCGM 101:2008, 8.2, stated as a size rather than a
    pass/fail against a tolerance that a fixed number of draws may not reach).
    """
    mc = data.monte_carlo
    if mc.empty:
        return pd.DataFrame()
    rows = []
    for name, r in mc.iterrows():
        si = data.results.loc[name, "unit"] if name in data.results.index else ""
        value = data.results.loc[name, "value"] if name in data.results.index else r["value"]
        U = data.results.loc[name, "U95"] if name in data.results.index else math.nan
        unit, scale, off = result_display(name, si, value)
        s = abs(scale)
        lin_lo = (float(value) - float(U)) * scale + off
        lin_hi = (float(value) + float(U)) * scale + off
        lo, hi = float(r["low"]) * scale + off, float(r["high"]) * scale + off
        Ud = float(U) * s
        diff = max(abs(lo - lin_lo), abs(hi - lin_hi)) / Ud * 100.0 if Ud > 0 else math.nan
        rows.append(
            dict(
                name=name,
                unit=unit,
                value=float(r["value"]) * scale + off,
                u=float(r["u"]) * s,
                low=lo,
                high=hi,
                u_linear=float(r["u_linear"]) * s,
                ratio=float(r["ratio"]),
                linear_low=lin_lo,
                linear_high=lin_hi,
                end_difference=diff,
            )
        )
    return pd.DataFrame(rows)


def exergy_table(data: ReportData) -> pd.DataFrame:
    """Exergy balance per piece of equipment in MW; ``share`` in % of the fuel exergy.

    Every power column, the heat column included, is converted from W to MW; the
    equipment column is named ``equipment`` (``unit`` is kept for units of measure).
    """
    e = data.exergy
    if e.empty:
        return pd.DataFrame()
    out = e.copy()
    for c in (
        "exergy_in",
        "exergy_out",
        "work_in",
        "work_out",
        "destroyed",
        "u_destroyed",
        "gouy_stodola",
        "heat",
    ):
        if c in out.columns:
            out[c] = out[c] / 1e6
    if "share" in out.columns:
        out["share"] = out["share"] * 100.0
    return out.rename(columns={"unit": "equipment"})


def closure_table(data: ReportData) -> pd.DataFrame:
    """Imbalances after reconciliation per piece of equipment.

    Columns ``equipment, type, mass_imbalance`` [kg/s], ``energy_imbalance`` [kW],
    ``energy_throughput`` [MW].
    """
    c = data.closure
    if c.empty:
        return pd.DataFrame()
    out = c.copy()
    if "energy_imbalance" in out.columns:
        out["energy_imbalance"] = out["energy_imbalance"] / 1e3
    if "energy_throughput" in out.columns:
        out["energy_throughput"] = out["energy_throughput"] / 1e6
    return out.rename(columns={"unit": "equipment"})


def timings_table(data: ReportData) -> pd.DataFrame:
    """Seconds per pipeline stage and their share."""
    if not data.timings:
        return pd.DataFrame()
    t = pd.Series(data.timings, dtype=float)
    total = float(t.sum())
    return pd.DataFrame(
        {
            "stage": t.index,
            "seconds": t.to_numpy(),
            "share": t.to_numpy() / total * 100.0 if total > 0 else math.nan,
        }
    )


# A cell whose text starts with one of these is read as a formula by spreadsheet
# programs; tab and carriage return can hide one (common practice, no source).
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _number_text(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def spreadsheet_safe(value):
    """A cell value that a spreadsheet program shows as text, never runs as a formula.

    Text taken from input files (tag names, descriptions, units, notes) that starts
    with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return gets a leading single
    quote.  Numbers, and texts that are plain numbers such as ``-1.5``, stay as they are.

    Parameters
    ----------
    value : object

    Returns
    -------
    object
        ``value`` unchanged, or the neutralised text.
    """
    if isinstance(value, str) and value.startswith(_FORMULA_START) and not _number_text(value):
        return "'" + value
    return value


def write_csv(df: pd.DataFrame, path) -> Path:
    """Write a report table as CSV (UTF-8), text cells made :func:`spreadsheet_safe`.

    Parameters
    ----------
    df : DataFrame
    path : path
        The file to write; its folder is created.  The caller chooses the name:
        nothing in the table decides where it goes.

    Returns
    -------
    Path
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    out = df.copy()
    out.columns = [spreadsheet_safe(str(c)) for c in out.columns]
    for c in out.columns:
        if out[c].dtype == object or pd.api.types.is_string_dtype(out[c]):
            out[c] = out[c].map(spreadsheet_safe)
    if out.index.dtype == object or pd.api.types.is_string_dtype(out.index):
        out.index = out.index.map(spreadsheet_safe)
    from perftest.report.output import write_atomic

    return write_atomic(path, out.to_csv())
