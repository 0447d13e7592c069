"""Reports of a test of several repeated runs or load points.

:func:`with_campaign` puts a :class:`perftest.evaluation.multirun.Campaign` into a
:class:`ReportData` built from its first window: the summary's ``results`` become
the combined test result (repeated runs) or gain the weighted part-load figures
(load points), the guarantees become the verdicts on the combined result (runs)
or per point (points), and ``ReportData.campaign`` keeps each window's tables
for ``summary.json`` (``runs`` / ``points``, ``repeatability``), the report's
sections and the part-load figure.
"""

from __future__ import annotations

from dataclasses import replace

import pandas as pd

from perftest.display.format import fmt_uncertain, result_unit, unit_label
from perftest.report.data import ReportData, finite_or_none
from perftest.report.document import Block, sections

__all__ = [
    "with_campaign",
    "campaign_summary",
    "campaign_blocks",
    "report_sections",
    "part_load_figure",
    "campaign_figures",
]

#: How the repeatability check is made (stated in summary.json and the report).
REPEATABILITY_METHOD = (
    "chi-squared test of the runs against their weighted mean using the random parts "
    "only (systematic errors are common to the runs); agreement when p >= 0.05; for two "
    "runs |r1 - r2| <= 1.96 sqrt(u_r1^2 + u_r2^2) (J. R. Taylor, An Introduction to "
    "Error Analysis, 2nd ed., 1997, ch. 12)"
)


def _window_table(w) -> pd.DataFrame:
    r = w.results()
    r["description"] = w.performance.results["description"]
    return r


def with_campaign(data: ReportData, test) -> ReportData:
    """``data`` (built from the test's first window) with the whole test in it.

    Parameters
    ----------
    data : ReportData
        From :func:`perftest.report.collect` with the first window's objects.
    test : perftest.evaluation.multirun.Campaign

    Returns
    -------
    ReportData
    """
    wins = [
        {
            "label": w.label,
            "start": pd.Timestamp(w.start).isoformat(),
            "end": pd.Timestamp(w.end).isoformat(),
            "weight": w.weight,
            "results": _window_table(w),
            "guarantees": w.performance.guarantees.copy(),
            "global_test": dict(w.reconciliation.global_test),
            "eliminated": list(w.reconciliation.eliminated_tags),
        }
        for w in test.windows
    ]
    first = data.results
    if test.mode == "runs":
        results = test.results.copy()
        results["basis"] = first["basis"].reindex(results.index) if "basis" in first else ""
        guarantees = test.guarantees.copy()
    else:
        results = pd.concat([first, test.results]) if not test.results.empty else first
        guarantees = test.guarantees.copy()
    meta = dict(data.meta)
    kind = "Repeated runs" if test.mode == "runs" else "Load points"
    listing = "; ".join(
        f"{w['label']}: {pd.Timestamp(w['start']):%Y-%m-%d %H:%M} to "
        f"{pd.Timestamp(w['end']):%H:%M}"
        + (f" (weight {w['weight']:g})" if w["weight"] is not None else "")
        for w in wins
    )
    # the header lists the windows first; the single-window lines describe run 1
    meta = {
        kind: listing,
        **{
            (
                f"{k} ({wins[0]['label']})"
                if k in ("Window", "Window chosen", "Samples per tag")
                else k
            ): v
            for k, v in meta.items()
        },
    }
    meta.pop(f"Window chosen ({wins[0]['label']})", None)
    campaign = {
        "mode": test.mode,
        "windows": wins,
        "repeatability": test.repeatability.copy(),
        "combined": test.results.copy(),
        "level": test.level,
    }
    window = dict(data.window)
    window["start"], window["end"] = wins[0]["start"], wins[-1]["end"]
    window["how"] = f"{len(wins)} {kind.lower()} as stated"
    return replace(
        data,
        results=results,
        guarantees=guarantees,
        campaign=campaign,
        meta=meta,
        window=window,
        notes=list(data.notes) + list(test.notes),
    )


def _results_dict(frame: pd.DataFrame) -> dict:
    out = {}
    for name, r in frame.iterrows():
        d = {k: finite_or_none(r.get(k)) for k in ("value", "u", "U95")}
        d["unit"] = str(r.get("unit", ""))
        for k in ("u_random", "u_systematic"):
            if k in r.index:
                d[k] = finite_or_none(r[k])
        out[str(name)] = d
    return out


def _guarantees_list(frame: pd.DataFrame) -> list:
    return [
        {
            "quantity": str(r["quantity"]),
            "corrected_value": finite_or_none(r["corrected_value"]),
            "U95": finite_or_none(r["U95"]),
            "guaranteed": finite_or_none(r["guaranteed"]),
            "direction": str(r["direction"]),
            "verdict": str(r["verdict"]),
        }
        for r in frame.to_dict("records")
    ]


def campaign_summary(data: ReportData) -> dict:
    """The ``runs`` / ``points`` and ``repeatability`` keys of summary.json ({} if none)."""
    c = data.campaign
    if not c:
        return {}
    entries = []
    for w in c["windows"]:
        e = {"label": w["label"], "start": w["start"], "end": w["end"]}
        if c["mode"] == "points":
            e["weight"] = w["weight"]
        e["results"] = _results_dict(w["results"])
        e["guarantees"] = _guarantees_list(w["guarantees"])
        e["global_test"] = {k: w["global_test"].get(k) for k in ("chi2", "dof", "p_value",
                                                                  "passed")}  # fmt: skip
        e["eliminated"] = list(w["eliminated"])
        entries.append(e)
    out: dict = {c["mode"]: entries}
    if c["mode"] == "runs":
        rep = c["repeatability"]
        per = {}
        for name, r in rep.iterrows():
            per[str(name)] = {
                "values": [finite_or_none(w["results"].loc[name, "value"]) for w in c["windows"]],
                "u_random": [
                    finite_or_none(w["results"].loc[name, "u_random"]) for w in c["windows"]
                ],
                "spread": finite_or_none(r["spread"]),
                "limit": finite_or_none(r["limit"]),
                "chi2": finite_or_none(r["chi2"]),
                "dof": int(r["dof"]),
                "p_value": finite_or_none(r["p_value"]),
                "passed": None if r["passed"] is None else bool(r["passed"]),
            }
        verdicts = [v["passed"] for v in per.values() if v["passed"] is not None]
        out["repeatability"] = {
            "method": REPEATABILITY_METHOD,
            "alpha": 0.05,
            "passed": all(verdicts) if verdicts else None,
            "results": per,
        }
    return out


def campaign_blocks(data: ReportData, figures=()) -> list:
    """Report sections of the runs or points (empty for a single window)."""
    c = data.campaign
    if not c:
        return []
    wins = c["windows"]
    runs = c["mode"] == "runs"
    b = [Block("h2", "Repeated runs" if runs else "Load points")]
    b.append(
        Block(
            "p",
            (
                f"{len(wins)} runs of one condition, each averaged, reconciled, evaluated and "
                "corrected on its own. The test result is their mean; its uncertainty keeps "
                "the systematic parts shared by the runs (the same instruments) and the "
                "random parts independent (GUM 5.2, Eq. 13): averaging runs shrinks the "
                "random part only. Guarantees are judged on the mean."
                if runs
                else f"{len(wins)} load points, each averaged, reconciled, evaluated, "
                "corrected and judged on its own. Values ± U95."
            ),
        )
    )
    first = wins[0]["results"]
    names = [n for n in first.index if n in _SHOWN or n.removeprefix("corrected_") in _SHOWN]
    rows = []
    for n in names:
        unit, scale, off = result_unit(n, first.loc[n, "unit"], first.loc[n, "value"])
        row = {"result": str(first.loc[n].get("description", n))}
        for w in wins:
            r = w["results"].loc[n] if n in w["results"].index else None
            if r is None:
                row[w["label"]] = "–"
                continue
            v, U = fmt_uncertain(r["value"] * scale + off, r["U95"] * abs(scale))
            row[w["label"]] = f"{v} ± {U}"
        if runs and n in c["combined"].index:
            r = c["combined"].loc[n]
            v, U = fmt_uncertain(r["value"] * scale + off, r["U95"] * abs(scale))
            row["mean of the runs"] = f"{v} ± {U}"
        row["unit"] = unit_label(unit) if unit not in ("1", "") else "–"
        rows.append(row)
    if rows:
        b.append(Block("table", table=pd.DataFrame(rows), flags=[False] * len(rows)))
    if runs and not c["repeatability"].empty:
        b.append(Block("p", f"Repeatability: {REPEATABILITY_METHOD}."))
        rr, flags = [], []
        for name, r in c["repeatability"].iterrows():
            unit, scale, _ = result_unit(name, first.loc[name, "unit"], first.loc[name, "value"])
            ok = r["passed"]
            rr.append({
                "result": name,
                "spread": fmt_uncertain(r["spread"] * abs(scale), r["spread"] * abs(scale))[0],
                "allowed (2 runs)": "–" if pd.isna(r["limit"]) else fmt_uncertain(
                    r["limit"] * abs(scale), r["limit"] * abs(scale))[0],
                "unit": unit_label(unit) if unit not in ("1", "") else "–",
                "chi2": f"{r['chi2']:.2f}",
                "p": f"{r['p_value']:.3f}",
                "verdict": "agree" if ok else ("runs disagree" if ok is False else "not tested"),
            })  # fmt: skip
            flags.append(ok is False)
        b.append(Block("table", table=pd.DataFrame(rr), flags=flags))
        if any(flags):
            b.append(
                Block(
                    "warning",
                    "The runs differ by more than their random uncertainty allows for "
                    + ", ".join(
                        n for n, f in zip(c["repeatability"].index, flags, strict=True) if f
                    )  # fmt: skip
                    + ": the plant moved between runs or a run was not steady. Check the "
                    "runs before using their mean.",
                )
            )
    if not runs:
        gl = []
        for w in wins:
            for g in w["guarantees"].to_dict("records"):
                gl.append(f"{w['label']}: {g['quantity']} {g['direction'].replace('_', ' ')} "
                          f"guaranteed value: {str(g['verdict']).upper()}")  # fmt: skip
        if gl:
            b.append(Block("list", items=gl))
        if not c["combined"].empty:
            items = []
            for n, r in c["combined"].iterrows():
                unit, scale, off = result_unit(n, r["unit"], r["value"])
                v, U = fmt_uncertain(r["value"] * scale + off, r["U95"] * abs(scale))
                items.append(f"{r['description']}: {v} ± {U} {unit_label(unit)} (U95)")
            b.append(Block("list", items=items))
        if "part_load" in set(figures):
            b.append(Block("figure", "Results against load, with U95 bars.", figure="part_load"))
    return b


_SHOWN = (
    "net_power",
    "heat_rate",
    "first_law_efficiency",
    "heat_export",
    "fuel_utilisation",
    "cooling_capacity",
    "heating_capacity",
    "power_input",
    "cop",
    "boiler_efficiency",
)


def part_load_figure(data: ReportData):
    """COP (or efficiency) of each load point against its load, with U95 bars."""
    c = data.campaign
    if not c or c["mode"] != "points" or len(c["windows"]) < 2:
        return None
    from perftest.report.figures import _figure

    first = c["windows"][0]["results"]
    # results computed at every point (a point may lack one, e.g. out of a curve's range)
    common = set.intersection(*(set(w["results"].index) for w in c["windows"]))
    load = next((n for n in ("cooling_capacity", "heating_capacity", "net_power",
                             "heat_export") if n in common), None)  # fmt: skip
    ys = [n for n in ("cop", "corrected_cop", "first_law_efficiency", "corrected_heat_rate",
                      "heat_rate") if n in common][:2]  # fmt: skip
    if load is None or not ys:
        return None
    units = {n: result_unit(n, first.loc[n, "unit"], first.loc[n, "value"]) for n in ys}
    # one y axis: a second result only when it is shown in the first one's unit
    # (an efficiency in % beside a heat rate in kJ/kWh would flatten one of them)
    ys = [n for n in ys if units[n][0] == units[ys[0]][0]]
    fig, ax = _figure(size=(7.0, 4.2))
    lu, ls, lo = result_unit(load, first.loc[load, "unit"], first.loc[load, "value"])
    for n, marker in zip(ys, ("o", "s"), strict=False):
        yu, ysc, yo = units[n]
        x = [w["results"].loc[load, "value"] * ls + lo for w in c["windows"]]
        xe = [w["results"].loc[load, "U95"] * abs(ls) for w in c["windows"]]
        y = [w["results"].loc[n, "value"] * ysc + yo for w in c["windows"]]
        ye = [w["results"].loc[n, "U95"] * abs(ysc) for w in c["windows"]]
        label = f"{n} [{unit_label(yu) if yu != '1' else '–'}]"
        ax.errorbar(x, y, xerr=xe, yerr=ye, fmt=marker, capsize=4, label=label)
        for xi, yi, w in zip(x, y, c["windows"], strict=True):
            ax.annotate(w["label"], (xi, yi), textcoords="offset points", xytext=(6, 6))
    ax.set_xlabel(f"{load} [{unit_label(lu)}]")
    yu = units[ys[0]][0]
    ax.set_ylabel(f"result [{unit_label(yu) if yu != '1' else '–'}]")
    ax.set_title("Part load: result against load (bars: U95)")
    ax.legend()
    ax.grid(True, alpha=0.3)
    return fig


def campaign_figures(data: ReportData) -> dict:
    """The figures of a test of several windows: ``{"part_load": Figure}`` or {}."""
    fig = part_load_figure(data)
    return {} if fig is None else {"part_load": fig}


def report_sections(data: ReportData, *, figures=()) -> list:
    """:func:`perftest.report.document.sections` with the runs' or points' sections
    after the summary."""
    blocks = sections(data, figures=figures)
    extra = campaign_blocks(data, figures)
    if not extra:
        return blocks
    seen_summary = False
    for i, blk in enumerate(blocks):
        if blk.kind == "h2" and seen_summary:
            return blocks[:i] + extra + blocks[i:]
        if blk.kind == "h2" and blk.text == "Summary":
            seen_summary = True
    return blocks + extra
