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
    "timings_table",
    "spreadsheet_safe",
    "write_csv",
]

# kJ in one International Table Btu (exact; NIST SP 811, Appendix B).
_BTU_KJ = 1.05505585262

# result SI unit -> (display unit, scale, offset); display = value * scale + offset
_RESULT_DISPLAY = {
    "W": ("MW", 1e-6, 0.0),
    "1": ("%", 100.0, 0.0),
    "J/J": ("kJ/kWh", 3600.0, 0.0),
    "K": ("degC", 1.0, -273.15),
}


def to_display(values, unit: str | None, *, atmospheric_pressure=None, difference=False):
    """Convert SI values to a tag's display unit.

    Parameters
    ----------
    values : float or array [SI]
    unit : str or None
        Display unit (as logged).  ``None`` leaves the values in SI.
    atmospheric_pressure : float, optional [Pa]
        For gauge units.
    difference : bool
        Convert as an interval (uncertainty, deviation).

    Returns
    -------
    (ndarray, str)
        Converted values and the unit they are in (the SI unit when the display
        unit cannot be used, e.g. a gauge unit without atmospheric pressure).
    """
    arr = np.asarray(values, dtype=float)
    if not unit:
        return arr, ""
    from perftest import units as _u
    from perftest.errors import PerftestError

    try:
        out = _u.from_si(
            arr,
            unit,
            atmospheric_pressure=None if difference else atmospheric_pressure,
            difference=difference,
        )
        return np.asarray(out, dtype=float), unit
    except PerftestError:
        try:
            return arr, _u.si_unit(_u.quantity_of(unit))
        except PerftestError:
            return arr, ""


def result_display(name: str, si_unit: str):
    """(display unit, scale, offset) of a result."""
    return _RESULT_DISPLAY.get(si_unit, (si_unit, 1.0, 0.0))


def _tag_unit(data: ReportData, tag: str) -> str | None:
    return data.units.get(tag)


def measurements_table(data: ReportData) -> pd.DataFrame:
    """Averaged measurements in display units.

    Columns ``tag, quantity, mean, u_random, u_systematic, u, U95, unit, dof,
    n_samples, n_excluded``; ``U95 = 1.96 u`` (normal coverage; the reconciliation
    and the results use the covariance itself, not this column).
    """
    m = data.measurements
    if m.empty:
        return pd.DataFrame()
    rows = []
    for r in m.itertuples(index=False):
        unit = _tag_unit(data, r.tag)
        atm = data.atmospheric_pressure
        mean, shown = to_display(r.value, unit, atmospheric_pressure=atm)
        ur, _ = to_display(r.u_random, unit, difference=True)
        us, _ = to_display(r.u_systematic, unit, difference=True)
        u, _ = to_display(r.u, unit, difference=True)
        if shown != unit:  # fell back to SI
            mean, ur, us, u = r.value, r.u_random, r.u_systematic, r.u
        rows.append(
            dict(
                tag=r.tag,
                quantity=r.quantity,
                mean=float(mean),
                u_random=float(ur),
                u_systematic=float(us),
                u=float(u),
                U95=1.96 * float(u),
                unit=shown,
                dof=float(r.dof),
                n_samples=int(r.n_samples),
                n_excluded=int(r.n_excluded),
            )
        )
    return pd.DataFrame(rows)


def stability_table(data: ReportData) -> pd.DataFrame:
    """Stability of each tag over the window, deviations in display units.

    Columns ``tag, mean, max_deviation, drift, permissible, unit, ratio, passed``.
    """
    s = data.stability
    if s.empty:
        return pd.DataFrame()
    rows = []
    for tag, r in s.iterrows():
        unit = _tag_unit(data, tag)
        mean, shown = to_display(
            r.get("mean", np.nan), unit, atmospheric_pressure=data.atmospheric_pressure
        )
        conv = {}
        for col in ("max_deviation", "drift", "permissible"):
            v, _ = to_display(r.get(col, np.nan), unit, difference=True)
            conv[col] = float(v) if shown == unit else float(r.get(col, np.nan))
        passed = r.get("passed", pd.NA)
        rows.append(
            dict(
                tag=tag,
                mean=float(mean) if shown == unit else float(r.get("mean", np.nan)),
                **conv,
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
    atm = data.atmospheric_pressure
    for row in r.itertuples(index=False):
        unit = _tag_unit(data, row.tag)
        meas, shown = to_display(row.measured, unit, atmospheric_pressure=atm)
        rec, _ = to_display(row.reconciled, unit, atmospheric_pressure=atm)
        um, _ = to_display(row.u_measured, unit, difference=True)
        ur, _ = to_display(row.u_reconciled, unit, difference=True)
        if shown != unit:
            meas, rec, um, ur = row.measured, row.reconciled, row.u_measured, row.u_reconciled
        rows.append(
            dict(
                tag=row.tag,
                unit=shown,
                measured=float(meas),
                u_measured=float(um),
                reconciled=float(rec),
                u_reconciled=float(ur),
                adjustment=float(rec) - float(meas),
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
    row in Btu/kWh when ``btu``.
    """
    res = data.results
    if res.empty:
        return pd.DataFrame()
    rows = []
    for name, r in res.iterrows():
        unit, scale, offset = result_display(name, r["unit"])
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


def budget_table(data: ReportData, name: str, top: int | None = None) -> pd.DataFrame:
    """Uncertainty budget of one result.

    Columns ``input, estimate, u, sensitivity, u_contribution, share`` with the
    contribution in the result's display unit and the share in %.  Sorted by
    share, largest first.
    """
    b = data.budgets.get(name)
    if b is None or b.empty:
        return pd.DataFrame()
    si = data.results.loc[name, "unit"] if name in data.results.index else ""
    unit, scale, _ = result_display(name, si)
    out = b.reset_index().rename(columns={"index": "input"})
    if "input" not in out.columns:
        out = out.rename(columns={out.columns[0]: "input"})
    out["u_contribution"] = out["u_contribution"] * abs(scale)
    out["share"] = out["share"] * 100.0
    out = out.sort_values("share", ascending=False, key=lambda s: s.abs())
    out.attrs["unit"] = unit
    return out.head(top) if top else out


def guarantees_table(data: ReportData) -> pd.DataFrame:
    """Guarantee verdicts in the guarantee's own unit.

    Columns ``quantity, corrected_value, U95, guaranteed, unit, direction, verdict,
    rule``.
    """
    g = data.guarantees
    if g.empty:
        return pd.DataFrame()
    rows = []
    for r in g.itertuples(index=False):
        unit = r.unit or ""
        vals = [r.corrected_value, r.U95, r.guaranteed]
        if unit:
            from perftest import units as _u
            from perftest.errors import PerftestError

            try:
                conv = [
                    float(_u.from_si(vals[0], unit)),
                    float(_u.from_si(vals[1], unit, difference=True)),
                    float(_u.from_si(vals[2], unit)),
                ]
                vals = conv
            except PerftestError:
                unit = ""
        rows.append(
            dict(
                quantity=r.quantity,
                corrected_value=vals[0],
                U95=vals[1],
                guaranteed=vals[2],
                unit=unit,
                direction=r.direction.replace("_", " "),
                verdict=r.verdict,
                rule=getattr(r, "rule", "guarded"),
            )
        )
    return pd.DataFrame(rows)


def exergy_table(data: ReportData) -> pd.DataFrame:
    """Exergy balance per unit in MW; ``share`` in % of the fuel exergy."""
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
    ):
        if c in out.columns:
            out[c] = out[c] / 1e6
    if "share" in out.columns:
        out["share"] = out["share"] * 100.0
    return out


def closure_table(data: ReportData) -> pd.DataFrame:
    """Unit imbalances after reconciliation: mass in kg/s, energy in kW."""
    c = data.closure
    if c.empty:
        return pd.DataFrame()
    out = c.copy()
    if "energy_imbalance" in out.columns:
        out["energy_imbalance"] = out["energy_imbalance"] / 1e3
    if "energy_throughput" in out.columns:
        out["energy_throughput"] = out["energy_throughput"] / 1e6
    return out.rename(
        columns={
            "energy_imbalance": "energy_imbalance_kW",
            "energy_throughput": "throughput_MW",
            "mass_imbalance": "mass_imbalance_kg_s",
        }
    )


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
