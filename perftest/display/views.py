"""Short text and HTML views of the pipeline objects, for ``repr`` and notebooks.

Each view reads the object's public attributes only (no imports from the layers
that define the classes), shows values in display units (the tag's logged unit by
default) rounded to their U95, and keeps the text form to a few lines.  The classes
call these functions from their ``__repr__`` and ``_repr_html_``.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from perftest.display.format import (
    NO_UNIT,
    convert,
    fmt_dof,
    fmt_number,
    fmt_plain,
    fmt_u,
    fmt_uncertain,
    html_block,
    html_table,
    k95,
    resolve_units,
    result_unit,
    text_table,
    unit_label,
)

__all__ = [
    "plant_text",
    "plant_html",
    "record_text",
    "measurements_frame",
    "measurements_text",
    "measurements_html",
    "reconciliation_frame",
    "reconciliation_text",
    "reconciliation_html",
    "performance_frame",
    "performance_text",
    "performance_html",
    "plan_text",
    "plan_html",
    "campaign_text",
    "campaign_html",
    "WindowTable",
]

_K95_NORMAL = 1.959963984540054


def _label(unit: str) -> str:
    return "" if unit in ("1", "") else unit_label(unit)


def _atmospheric(plant, measurements=None):
    """[Pa] for gauge units: the site's stated value or the barometer tag's mean."""
    site = getattr(plant, "site", None)
    if site is None:
        return None
    if getattr(site, "atmospheric_pressure", None) is not None:
        return float(site.atmospheric_pressure)
    tag = getattr(site, "barometer_tag", None)
    if tag and measurements is not None and tag in getattr(measurements, "tags", ()):
        return float(measurements.value[measurements.tags.index(tag)])
    return None


def _densities(plant) -> dict:
    out = {}
    for tid, spec in (getattr(plant, "tags", None) or {}).items():
        if getattr(spec, "density", None) is not None:
            out[tid] = float(spec.density)
    return out


# --------------------------------------------------------------------------- plant
def _uncertainty_text(u, unit: str = "") -> str:
    if u is None:
        return NO_UNIT
    kind = {
        "absolute": "",
        "percent_of_reading": "% of reading",
        "percent_of_span": "% of span",
    }.get(getattr(u, "kind", ""), getattr(u, "kind", ""))
    if getattr(u, "kind", "") == "absolute":
        kind = unit_label(unit)
    level = getattr(u, "level", "")
    lvl = f"{float(level) * 100:g} %" if isinstance(level, int | float) else str(level)
    return f"{fmt_number(u.value, 3)} {kind}".strip() + (f" ({lvl})" if lvl else "")


def plant_text(plant) -> str:
    """A few lines: name, file, tags by quantity, equipment, guarantees."""
    sections = getattr(plant, "sections", {}) or {}
    tags = getattr(plant, "tags", {}) or {}
    by_q: dict = {}
    for spec in tags.values():
        by_q[spec.quantity or "?"] = by_q.get(spec.quantity or "?", 0) + 1
    lines = [f"Plant {plant.name!r} ({getattr(plant.path, 'name', plant.path)})"]
    lines.append(
        f"  {len(tags)} tags ("
        + ", ".join(f"{n} {q}" for q, n in sorted(by_q.items(), key=lambda kv: -kv[1]))
        + f"), {len(getattr(plant, 'groups', {}) or {})} group(s)"
    )
    streams = sections.get("streams") or {}
    units = sections.get("units") or {}
    if streams or units:
        lines.append(f"  model: {len(streams)} streams, {len(units)} pieces of equipment")
    perf = sections.get("performance") or {}
    if perf:
        lines.append(f"  performance kind: {perf.get('kind', 'power')}")
    for g in sections.get("guarantees") or []:
        if isinstance(g, dict):
            lines.append(
                f"  guarantee: {g.get('quantity')} {str(g.get('direction', '')).replace('_', ' ')}"
                f" {g.get('value')} {unit_label(g.get('unit', ''))}".rstrip()
            )
    return "\n".join(lines)


def plant_html(plant) -> str:
    """Summary lines and the tag table (unit, instrument uncertainty, description)."""
    tags = getattr(plant, "tags", {}) or {}
    rows = [
        [
            tid,
            spec.quantity or "",
            unit_label(spec.unit),
            _uncertainty_text(getattr(spec, "uncertainty", None), spec.unit),
            getattr(spec, "description", "") or "",
        ]
        for tid, spec in tags.items()
    ]
    header = ["tag", "quantity", "unit", "instrument uncertainty", "description"]
    lines = plant_text(plant).splitlines()
    return html_block(
        lines[0], [s.strip() for s in lines[1:]], [html_table(header, rows, limit=40)]
    )


# ---------------------------------------------------------------- measurements
def record_text(rec) -> str:
    """One tag of a Measurements: the value in its display unit with U95."""
    value, unit = convert(rec.value, rec.unit, quantity=rec.quantity or None)
    u, _ = convert(rec.u, unit, quantity=rec.quantity or None, difference=True)
    U = k95(rec.dof) * float(u)
    v, Ut = fmt_uncertain(float(value), U)
    si, si_unit = rec.value, ""
    try:
        from perftest.units import si_unit as _si

        si_unit = _si(rec.quantity) if rec.quantity else ""
    except Exception:  # unknown quantity: show no SI unit rather than fail
        si_unit = ""
    inside = f"; {fmt_plain(si, 6)} {si_unit} inside" if si_unit and si_unit != unit else ""
    return (
        f"MeasurementRecord({rec.tag!r}, {rec.quantity or 'quantity?'}: {v} ± {Ut} "
        f"{_label(unit)} (U95{inside}), dof {fmt_dof(rec.dof)}, {rec.n_samples} samples, "
        f"{rec.n_excluded} excluded)"
    )


def measurements_frame(m, units="si", *, atmospheric_pressure=None, densities=None):
    """``Measurements.to_frame`` in the units asked for (see ``resolve_units``).

    Values and standard uncertainties are converted together, and ``unit`` names
    the unit they are in (the SI unit when a display unit cannot be used).
    """
    names = resolve_units(m.tags, m.quantities, m.units, units)
    densities = densities or {}
    rows = []
    for i, tag in enumerate(m.tags):
        q = m.quantities[i] or None
        rho = densities.get(tag)
        v, shown = convert(
            m.value[i], names[i], quantity=q, atmospheric_pressure=atmospheric_pressure, density=rho
        )
        conv = {
            k: float(
                convert(arr[i], shown, quantity=q, difference=True, density=rho)[0]
                if shown
                else arr[i]
            )
            for k, arr in (("u_random", m.u_random), ("u_systematic", m.u_systematic), ("u", m.u))
        }
        rows.append(
            {
                "tag": tag,
                "quantity": m.quantities[i],
                "value": float(v),
                "unit": shown,
                **conv,
                "dof": float(m.dof[i]),
                "n_samples": int(m.n_samples[i]),
                "n_excluded": int(m.n_excluded[i]),
            }
        )
    cols = ["tag", "quantity", "value", "unit", "u_random", "u_systematic", "u", "dof"]
    return pd.DataFrame(rows, columns=[*cols, "n_samples", "n_excluded"])


def _window_text(start, end) -> str:
    if start is None and end is None:
        return ""
    try:
        return f"{pd.Timestamp(start):%Y-%m-%d %H:%M} to {pd.Timestamp(end):%Y-%m-%d %H:%M}"
    except (TypeError, ValueError):
        return f"{start} to {end}"


def _measurement_rows(m, units="logged"):
    f = measurements_frame(m, units)
    rows, header = (
        [],
        [
            "tag",
            "quantity",
            "mean",
            "U95",
            "unit",
            "u random",
            "u systematic",
            "degrees of freedom",
            "samples",
            "excluded",
        ],
    )
    flags = []
    for r in f.to_dict("records"):
        U = k95(r["dof"]) * r["u"]
        v, Ut = fmt_uncertain(r["value"], U)
        rows.append(
            [
                r["tag"],
                r["quantity"],
                v,
                Ut,
                _label(r["unit"]) or NO_UNIT,
                fmt_u(r["u_random"]),
                fmt_u(r["u_systematic"]),
                fmt_dof(r["dof"]),
                str(r["n_samples"]),
                str(r["n_excluded"]),
            ]
        )
        flags.append(r["n_excluded"] > 0 and r["n_samples"] == 0)
    return header, rows, flags


def measurements_text(m, units="logged") -> str:
    head = f"Measurements: {len(m)} tags" + (
        f", window {_window_text(m.start, m.end)}" if m.start is not None else ""
    )
    header, rows, _ = _measurement_rows(m, units)
    return head + "\n" + text_table(header[:5], [r[:5] for r in rows], limit=8)


def measurements_html(m, units="logged") -> str:
    header, rows, flags = _measurement_rows(m, units)
    lines = []
    if m.start is not None:
        lines.append(f"window {_window_text(m.start, m.end)}")
    lines.append("U95 = k·u, k from the Student t of the degrees of freedom; logged units")
    lines += list(m.notes)
    return html_block(
        f"Measurements: {len(m)} tags", lines, [html_table(header, rows, flags=flags)]
    )


# --------------------------------------------------------------- reconciliation
def reconciliation_frame(frame: pd.DataFrame, rec, units="si") -> pd.DataFrame:
    """``PlantReconciliation.to_frame`` converted to the units asked for."""
    if isinstance(units, str) and units == "si":
        return frame
    m = rec.measurements
    names = resolve_units(m.tags, m.quantities, m.units, units)
    unit_of = dict(zip(m.tags, names, strict=True))
    atm = _atmospheric(getattr(rec, "plant", None), m)
    dens = _densities(getattr(rec, "plant", None))
    out = frame.copy()
    shown_units = []
    for i, r in enumerate(frame.to_dict("records")):
        q = r.get("quantity") or None
        rho = dens.get(r["tag"])
        meas, shown = convert(
            r["measured"], unit_of.get(r["tag"]), quantity=q, atmospheric_pressure=atm, density=rho
        )
        recd, _ = convert(
            r["reconciled"], shown or None, quantity=q, atmospheric_pressure=atm, density=rho
        )
        out.loc[i, "measured"] = float(meas)
        out.loc[i, "reconciled"] = float(recd)
        for k in ("u_measured", "u_reconciled", "adjustment"):
            out.loc[i, k] = float(
                convert(r[k], shown or None, quantity=q, difference=True, density=rho)[0]
            )
        shown_units.append(shown)
    out.insert(out.columns.get_loc("measured"), "unit", shown_units)
    return out


def _rec_rows(rec):
    f = reconciliation_frame(rec.to_frame(units="si"), rec, "logged")
    header = [
        "tag",
        "measured",
        "U95 without reconciliation",
        "reconciled",
        "U95 with reconciliation",
        "unit",
        "z",
        "flags",
    ]
    rows, flags = [], []
    for r in f.to_dict("records"):
        Um = _K95_NORMAL * r["u_measured"]
        Ur = _K95_NORMAL * r["u_reconciled"]
        mv, mU = fmt_uncertain(r["measured"], Um)
        rv, rU = fmt_uncertain(r["reconciled"], Ur)
        words = []
        if r.get("eliminated"):
            words.append("dropped")
        elif r.get("suspect"):
            words.append("suspect")
        if r.get("redundant"):
            words.append("redundant")
        if not r.get("in_balance", True):
            words.append("outside the balances")
        z = r["z"]
        rows.append(
            [
                r["tag"],
                mv,
                mU,
                rv,
                rU,
                _label(r["unit"]) or NO_UNIT,
                NO_UNIT if not math.isfinite(z) else f"{z:.2f}",
                ", ".join(words) or NO_UNIT,
            ]
        )
        flags.append(bool(r.get("suspect") or r.get("eliminated")))
    return header, rows, flags


def _global_line(rec) -> str:
    g = rec.global_test
    return (
        f"global test: χ² = {fmt_number(g['chi2'], 3)}, {g['dof']} degrees of freedom, "
        f"p = {fmt_number(g['p_value'], 2)}: {'passed' if g['passed'] else 'FAILED'} "
        f"at alpha = {rec.alpha:g}"
    )


def _rec_lines(rec) -> list:
    f = rec.to_frame(units="si")
    lines = [_global_line(rec)]
    sus = list(f.loc[f["suspect"], "tag"])
    lines.append(
        f"{len(f)} tags, {int(f['redundant'].sum())} redundant; suspects: "
        + (", ".join(sus) if sus else "none")
    )
    for e in getattr(rec, "eliminated", ()):
        tied = f" (tied with {', '.join(e.tied_with)})" if getattr(e, "tied_with", ()) else ""
        lines.append(f"dropped by serial elimination: {e.tag}, |z| = {abs(e.z):.2f}{tied}")
    lines += list(getattr(rec, "notes", ()))
    return lines


def reconciliation_text(rec) -> str:
    header, rows, _ = _rec_rows(rec)
    lines = _rec_lines(rec)
    body = text_table(header[:1] + header[3:6] + header[7:], [r[:1] + r[3:6] + r[7:] for r in rows])
    return "PlantReconciliation: " + lines[0] + "\n  " + "\n  ".join(lines[1:]) + "\n" + body


def reconciliation_html(rec) -> str:
    header, rows, flags = _rec_rows(rec)
    lines = _rec_lines(rec)
    lines.append("U95 = 1.96·u; logged units; adjustments in .to_frame(units='logged')")
    return html_block(
        "Plant reconciliation", lines, [html_table(header, rows, flags=flags, limit=40)]
    )


# ------------------------------------------------------------------ performance
def performance_frame(perf, units="engineering") -> pd.DataFrame:
    """``Performance.results`` in engineering units (``units="si"``: as stored)."""
    res = perf.results
    if isinstance(units, str) and units == "si":
        return res.copy()
    rows = []
    for name, r in res.iterrows():
        unit, scale, off = result_unit(name, r["unit"], r["value"])
        rows.append(
            {
                "name": name,
                "value": r["value"] * scale + off,
                "u": r["u"] * abs(scale),
                "U95": r["U95"] * abs(scale),
                "unit": unit,
                "description": r.get("description", ""),
            }
        )
    return pd.DataFrame(rows).set_index("name")


def _perf_rows(perf):
    f = performance_frame(perf)
    rows = []
    for name, r in f.iterrows():
        v, U = fmt_uncertain(r["value"], r["U95"])
        rows.append([str(r.get("description") or name), v, U, _label(r["unit"]) or NO_UNIT, name])
    return ["result", "value", "U95", "unit", "name"], rows


def _guarantee_lines(perf) -> list:
    g = getattr(perf, "guarantees", None)
    out = []
    if g is None or g.empty:
        return out
    for r in g.to_dict("records"):
        name = r["quantity"]
        si = perf.results.loc[name, "unit"] if name in perf.results.index else ""
        unit, scale, off = result_unit(name, si, r["corrected_value"])
        v, U = fmt_uncertain(r["corrected_value"] * scale + off, r["U95"] * abs(scale))
        gv = fmt_plain(r["guaranteed"] * scale + off)
        sign = {"at_least": "≥", "at_most": "≤"}.get(r["direction"], r["direction"])
        out.append(
            f"guarantee {name}: {v} ± {U} {_label(unit)} against {sign} {gv} {_label(unit)}: "
            f"{str(r['verdict']).upper()}"
        )
    return out


def performance_text(perf) -> str:
    header, rows = _perf_rows(perf)
    lines = [f"Performance: {len(rows)} results (U95 at {perf.level * 100:g} %)"]
    lines += ["  " + s for s in _guarantee_lines(perf)]
    return "\n".join(lines) + "\n" + text_table(header[:4], [r[:4] for r in rows], limit=10)


def performance_html(perf) -> str:
    header, rows = _perf_rows(perf)
    g = perf.guarantees if getattr(perf, "guarantees", None) is not None else pd.DataFrame()
    flags = []
    verdicts = dict(zip(g.get("quantity", []), g.get("verdict", []), strict=False))
    for r in rows:
        flags.append(verdicts.get(r[-1]) not in (None, "met"))
    lines = _guarantee_lines(perf) + list(getattr(perf, "notes", ()))
    return html_block(
        f"Performance: {len(rows)} results (U95 at {perf.level * 100:g} %)",
        lines,
        [html_table(header, rows, flags=flags, limit=None)],
    )


# ------------------------------------------------------------------------- plan
def _plan_rows(plan):
    res = plan.results
    header = [
        "result",
        "value",
        "U95 with reconciliation",
        "U95 without reconciliation",
        "unit",
        "ratio",
        "U95 allowed",
        "within allowed",
    ]
    rows, flags = [], []
    for name, r in res.iterrows():
        unit, scale, off = result_unit(name, r.get("unit", ""), r["value"])
        s = abs(scale)
        v, Uw = fmt_uncertain(r["value"] * scale + off, r["U95_with"] * s)
        _, Uo = fmt_uncertain(r["value"] * scale + off, r["U95_without"] * s)
        allowed = r.get("U95_allowed", np.nan)
        within = r.get("within_allowed", None)
        rows.append(
            [
                name,
                v,
                Uw,
                Uo,
                _label(unit) or NO_UNIT,
                fmt_number(r.get("ratio", np.nan), 2),
                fmt_u(allowed * s) if allowed == allowed else NO_UNIT,
                NO_UNIT if within is None or within != within else ("yes" if within else "no"),
            ]
        )
        flags.append(within is False)
    return header, rows, flags


def _plan_title(plan) -> str:
    hours = plan.duration / 3600.0
    return f"UncertaintyPlan: {len(plan.results)} results, planned test {fmt_number(hours, 3)} h"


def plan_text(plan) -> str:
    header, rows, _ = _plan_rows(plan)
    return _plan_title(plan) + "\n" + text_table(header[:5], [r[:5] for r in rows], limit=10)


def plan_html(plan) -> str:
    header, rows, flags = _plan_rows(plan)
    lines = [
        "predicted U95 at the design point, with and without reconciliation",
        _global_like(plan.global_test),
        *plan.notes,
    ]
    return html_block(_plan_title(plan), lines, [html_table(header, rows, flags=flags)])


def _campaign_rows(test):
    """One row per headline result: each window's value, then the combined one."""
    wins = test.windows
    names = [n for n in wins[0].performance.results.index if n in _campaign_names(test)]
    header = ["result", *[w.label for w in wins]]
    if test.mode == "runs":
        header += ["mean", "U95 (mean)"]
    header.append("unit")
    rows = []
    for n in names:
        si = wins[0].performance.results.loc[n, "unit"]
        unit, scale, off = result_unit(n, si, wins[0].performance.results.loc[n, "value"])
        row = [n]
        for w in wins:
            r = w.performance.results.loc[n] if n in w.performance.results.index else None
            row.append(
                "–"
                if r is None
                else fmt_uncertain(r["value"] * scale + off, r["U95"] * abs(scale))[0]
            )
        if test.mode == "runs" and n in test.results.index:
            c = test.results.loc[n]
            v, U = fmt_uncertain(c["value"] * scale + off, c["U95"] * abs(scale))
            row += [v, U]
        elif test.mode == "runs":  # not computed in every run: no mean
            row += ["–", "–"]
        row.append(_label(unit) or NO_UNIT)
        rows.append(row)
    for n, c in test.results.iterrows() if test.mode == "points" else ():
        unit, scale, off = result_unit(n, c["unit"], c["value"])
        v, U = fmt_uncertain(c["value"] * scale + off, c["U95"] * abs(scale))
        rows.append([n, f"{v} ± {U}", *[""] * (len(wins) - 1), _label(unit) or NO_UNIT])
    return header, rows


def _campaign_names(test) -> list:
    base = (
        "net_power",
        "heat_rate",
        "first_law_efficiency",
        "cooling_capacity",
        "heating_capacity",
        "power_input",
        "cop",
        "heat_export",
        "fuel_utilisation",
    )
    return [p + b for b in base for p in ("", "corrected_")]


def _campaign_lines(test) -> list:
    kind = "repeated runs" if test.mode == "runs" else "load points"
    lines = [
        f"{w.label}: {pd.Timestamp(w.start):%Y-%m-%d %H:%M} to {pd.Timestamp(w.end):%H:%M}"
        for w in test.windows
    ]
    rep = getattr(test, "repeatability", None)
    if rep is not None and not rep.empty:
        bad = [n for n, r in rep.iterrows() if r["passed"] is False]
        lines.append(
            "repeatability (χ² of the runs' random parts, 95 %): "
            + ("all agree" if not bad else "runs disagree on " + ", ".join(bad))
        )
    g = getattr(test, "guarantees", None)
    if g is not None and not g.empty:
        for r in g.to_dict("records"):
            where = f"{r['point']}: " if "point" in r else ""
            lines.append(f"guarantee {where}{r['quantity']}: {str(r['verdict']).upper()}")
    return [f"{len(test.windows)} {kind}", *lines]


def campaign_text(test) -> str:
    """Text view of a test of several runs or load points."""
    header, rows = _campaign_rows(test)
    lines = _campaign_lines(test)
    title = f"Test of {lines[0]} (U95 at {test.level * 100:g} %)"
    return (
        "\n".join([title, *("  " + x for x in lines[1:])])
        + "\n"
        + text_table(header, rows, limit=12)
    )


def campaign_html(test) -> str:
    """HTML view of a test of several runs or load points."""
    header, rows = _campaign_rows(test)
    lines = _campaign_lines(test)
    return html_block(
        f"Test of {lines[0]} (U95 at {test.level * 100:g} %)",
        lines[1:] + list(getattr(test, "notes", ())),
        [html_table(header, rows, limit=None)],
    )


def _global_like(g: dict) -> str:
    if not g or g.get("chi2") is None:
        return ""
    return (
        f"design-point global test: χ² = {fmt_number(g['chi2'], 3)}, {g.get('dof')} degrees "
        f"of freedom, p = {fmt_number(g.get('p_value'), 2)}"
    )


# --------------------------------------------------------------- windows table
class WindowTable(pd.DataFrame):
    """The table :func:`perftest.reconcile_many` returns: a DataFrame with a summary view.

    It is a plain DataFrame in every other way (its values are SI); selections and
    computations on it return plain DataFrames.  In a notebook it shows how many
    windows ended in each status, the period covered, and the results over time in
    engineering units.
    """

    @property
    def _constructor(self):
        return pd.DataFrame

    def _summary_lines(self) -> list:
        n = len(self)
        lines = []
        if n and "start" in self.columns:
            lines.append(
                f"{n} windows from {pd.Timestamp(self['start'].min()):%Y-%m-%d %H:%M} "
                f"to {pd.Timestamp(self['end'].max()):%Y-%m-%d %H:%M}"
            )
        else:
            lines.append(f"{n} windows")
        if "status" in self.columns and n:
            counts = self["status"].value_counts()
            lines.append("status: " + ", ".join(f"{k} {v}" for k, v in counts.items()))
        if "passed" in self.columns and n:
            passed = self["passed"].dropna()
            if len(passed):
                lines.append(
                    f"global test passed in {int(passed.astype(bool).sum())} of {len(passed)}"
                )
        return lines

    def _result_columns(self) -> list:
        return [c for c in self.columns if f"u_{c}" in self.columns and not str(c).startswith("u_")]

    def _rows(self, limit: int):
        cols = self._result_columns()
        header = ["window", "start", "status", "χ² p", "suspects"]
        units = {}
        for c in cols:
            vals = pd.to_numeric(self[c], errors="coerce")
            typical = vals.abs().median() if vals.notna().any() else None
            si = _result_si_unit(c)
            units[c] = result_unit(c, si, typical)
            header.append(f"{c} [{_label(units[c][0]) or NO_UNIT}]")
        rows = []
        for r in self.head(limit).to_dict("records"):
            row = [
                str(r.get("window")),
                f"{pd.Timestamp(r['start']):%Y-%m-%d %H:%M}" if r.get("start") is not None else "",
                str(r.get("status", "")),
                fmt_number(r.get("p_value"), 2),
                str(r.get("suspects") or NO_UNIT),
            ]
            for c in cols:
                _u, scale, off = units[c]
                v, u = r.get(c), r.get(f"u_{c}")
                try:
                    v, u = float(v), float(u)
                except (TypeError, ValueError):
                    row.append(NO_UNIT)
                    continue
                if not math.isfinite(v):
                    row.append(NO_UNIT)
                    continue
                a, b = fmt_uncertain(v * scale + off, _K95_NORMAL * u * abs(scale))
                row.append(f"{a} ± {b}")
            rows.append(row)
        return header, rows

    def _repr_html_(self) -> str:
        header, rows = self._rows(30)
        lines = self._summary_lines()
        lines.append("results ± U95 (1.96·u) in engineering units; the table itself is SI")
        table = html_table(header, rows, limit=None)
        if len(self) > 30:
            table += f'<div class="pt-more">… {len(self) - 30} more windows</div>'
        return html_block("Windows table (reconcile_many)", lines, [table])


# SI unit of the results by name, as the evaluation stores them; the windows table
# keeps only values, so the unit is told by the name (generic over plant kinds).
_SI_BY_SUFFIX = (
    ("efficiency", "1"),
    ("utilisation", "1"),
    ("cop", "1"),
    ("ratio", "1"),
    ("heat_rate", "J/J"),
    ("temperature", "K"),
    ("power", "W"),
    ("capacity", "W"),
    ("heat_input", "W"),
    ("heat_export", "W"),
    ("exergy", "W"),
)


def _result_si_unit(name: str) -> str:
    base = str(name).removeprefix("corrected_")
    for suffix, unit in _SI_BY_SUFFIX:
        if base.endswith(suffix):
            return unit
    return ""
