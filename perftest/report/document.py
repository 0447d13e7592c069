"""The report's content, once, for both the Markdown and the HTML writer.

:func:`sections` turns a :class:`ReportData` into an ordered list of blocks
(headings, paragraphs, tables, figures, warnings).  The writers only decide how a
block looks, so both reports always say the same thing.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import pandas as pd

from perftest.report import tables as T
from perftest.report.data import CAUTION, ReportData

__all__ = ["Block", "sections", "fmt", "fmt_uncertain"]


@dataclass(frozen=True)
class Block:
    """One piece of a report.

    ``kind`` is ``"h1"``, ``"h2"``, ``"p"``, ``"caution"``, ``"warning"``,
    ``"list"``, ``"table"`` or ``"figure"``.  Tables carry a DataFrame of
    formatted strings and a list of row flags (True = highlight, e.g. a suspect
    instrument); figures carry the figure's stem.
    """

    kind: str
    text: str = ""
    items: list = field(default_factory=list)
    table: pd.DataFrame | None = None
    flags: list = field(default_factory=list)
    figure: str = ""


# Columns shown with few significant digits (uncertainties, statistics).
_SHORT = {
    "u",
    "U95",
    "u_random",
    "u_systematic",
    "u_measured",
    "u_reconciled",
    "z",
    "ratio",
    "u_destroyed",
    "sensitivity",
    "u_contribution",
    "permissible",
    "max_deviation",
    "drift",
    "adjustment",
    "chi2",
    "p_value",
}


def fmt(v, short: bool = False) -> str:
    """Format a number for a table: 6 significant digits (3 for uncertainties)."""
    if v is None:
        return ""
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, int) and not isinstance(v, bool):
        return str(v)
    try:
        f = float(v)
    except (TypeError, ValueError):
        return str(v)
    if math.isnan(f):
        return "-"
    if math.isinf(f):
        return "inf"
    if f != 0 and (abs(f) >= 1e7 or abs(f) < 1e-4):
        return f"{f:.3g}" if short else f"{f:.6g}"
    return f"{f:.3g}" if short else f"{f:.6g}"


def fmt_uncertain(value, U) -> tuple[str, str]:
    """Value and expanded uncertainty rounded together: U to 2 significant digits,
    the value to the same decimal place (the usual way of stating a result)."""
    try:
        v, u = float(value), float(U)
    except (TypeError, ValueError):
        return fmt(value), fmt(U, True)
    if not (math.isfinite(v) and math.isfinite(u)) or u <= 0:
        return fmt(v), fmt(u, True)
    decimals = max(0, 1 - int(math.floor(math.log10(u))))
    return f"{v:.{decimals}f}", f"{u:.{decimals}f}"


def _strings(df: pd.DataFrame, *, percent=()) -> pd.DataFrame:
    out = pd.DataFrame(index=range(len(df)))
    for c in df.columns:
        col = df[c].tolist()
        if c in percent:
            out[c] = [fmt(v, short=True) if v is not None else "" for v in col]
        else:
            out[c] = [fmt(v, short=c in _SHORT) for v in col]
    return out


def _table(df: pd.DataFrame, flags=None, **kw) -> Block:
    return Block("table", table=_strings(df, **kw), flags=list(flags or [False] * len(df)))


def _headline(data: ReportData) -> list:
    res = data.results
    items = []
    for name in (
        "net_power",
        "heat_input",
        "first_law_efficiency",
        "heat_rate",
        "carnot_efficiency",
        "second_law_efficiency",
        "corrected_net_power",
        "corrected_heat_rate",
    ):
        if name in res.index:
            r = res.loc[name]
            unit, scale, off = T.result_display(name, r["unit"])
            v, u = fmt_uncertain(r["value"] * scale + off, r["U95"] * abs(scale))
            items.append(f"{r.get('description', name)}: {v} {unit} (U95 {u} {unit})")
    for g in data.guarantees.itertuples(index=False):
        items.append(f"Guarantee {g.quantity} ({g.direction.replace('_', ' ')}): {g.verdict}")
    gt = data.global_test
    if gt and gt.get("chi2") is not None:
        items.append(
            f"Global test: chi2 = {fmt(gt['chi2'], True)} with {gt['dof']} dof, p = "
            f"{fmt(gt['p_value'], True)} ({'passed' if gt['passed'] else 'failed'})"
        )
    return items


def sections(data: ReportData, *, figures=()) -> list:
    """Ordered blocks of the report.

    Parameters
    ----------
    data : ReportData
    figures : collection of str
        Stems of the figures that exist (others are not referenced).
    """
    figs = set(figures)
    b: list = [Block("h1", data.title + ": performance test report")]
    b.append(Block("caution", CAUTION))
    w = data.window
    b.append(
        Block(
            "p",
            f"perftest {data.version}. Window averaged: {w.get('start') or '-'} to "
            f"{w.get('end') or '-'}" + (f" ({w['how']})" if w.get("how") else "") + ".",
        )
    )
    if data.missing:
        b.append(Block("warning", "Stages not computed: " + "; ".join(data.missing)))

    b.append(Block("h2", "Summary"))
    head = _headline(data)
    if head:
        b.append(Block("list", items=head))
    suspects = []
    if not data.reconciliation.empty:
        suspects = list(data.reconciliation.loc[data.reconciliation["suspect"], "tag"])
    if data.eliminated or suspects:
        dropped = ", ".join(f"{e['tag']} (|z| = {fmt(abs(e['z']), True)})" for e in data.eliminated)
        txt = "Suspect instruments: " + ", ".join(suspects) + "."
        if dropped:
            txt += f" Dropped from the reconciliation by serial elimination: {dropped}."
        b.append(Block("warning", txt))

    # ---- window, stability, exclusions
    b.append(Block("h2", "Test window and stability"))
    if "stability" in figs:
        b.append(
            Block(
                "figure",
                "Trends over the whole run; the averaged window is shaded.",
                figure="stability",
            )
        )
    st = T.stability_table(data)
    if not st.empty:
        failed = [p is False for p in st["passed"]]
        n_fail = sum(failed)
        b.append(
            Block(
                "p",
                f"Permissible variation per tag: {n_fail} of {len(st)} tag(s) vary "
                "more than permitted (highlighted); ratio = largest deviation or drift / "
                "permissible variation.",
            )
        )
        b.append(_table(st, failed))
    ex = T.exclusions_table(data)
    b.append(Block("h2", "Excluded samples"))
    if ex.empty:
        b.append(Block("p", "No sample was excluded."))
    else:
        b.append(
            Block(
                "p",
                f"{int(ex['count'].sum())} sample(s) excluded; the raw values "
                "are kept in the run's exclusion table.",
            )
        )
        b.append(_table(ex))

    # ---- measurements
    mt = T.measurements_table(data)
    if not mt.empty:
        b.append(Block("h2", "Averaged measurements"))
        b.append(
            Block(
                "p",
                "Mean over the window with random (autocorrelation-corrected) "
                "and systematic standard uncertainties, in the logged units.",
            )
        )
        b.append(_table(mt))

    # ---- reconciliation
    rt = T.reconciliation_table(data)
    if not rt.empty:
        b.append(Block("h2", "Reconciliation"))
        gt = data.global_test or {}
        if gt.get("chi2") is not None:
            b.append(
                Block(
                    "p",
                    f"Global test: chi2 = {fmt(gt['chi2'], True)}, dof = {gt['dof']}, "
                    f"p = {fmt(gt['p_value'], True)}; "
                    f"{'passed' if gt['passed'] else 'failed'} at alpha = {data.alpha:g}. "
                    f"Measurement test critical value |z| = {data.critical_z:.2f}.",
                )
            )
        if data.eliminated:
            el = pd.DataFrame(data.eliminated)
            b.append(Block("p", "Serial elimination (instruments dropped, in order):"))
            b.append(_table(el))
            if any(e.get("indistinguishable_from") for e in data.eliminated):
                b.append(
                    Block(
                        "warning",
                        "Where a step lists instruments it is indistinguishable from, "
                        "their measurement-test statistics are equal: the test cannot "
                        "tell which of them is faulty, and the one dropped was chosen "
                        "arbitrarily. Check all of them before accepting the result.",
                    )
                )
        if "reconciliation" in figs:
            b.append(
                Block(
                    "figure",
                    "Adjustments and measurement-test statistics.",
                    figure="reconciliation",
                )
            )
        b.append(_table(rt, list(rt["suspect"] | rt["eliminated"])))
        ct = T.closure_table(data)
        if not ct.empty:
            b.append(Block("p", "Balance closure at the reconciled values (should be ~0):"))
            b.append(_table(ct))

    # ---- results
    res = T.results_table(data)
    if not res.empty:
        b.append(Block("h2", "Results"))
        b.append(
            Block(
                "p",
                "Standard uncertainty u and expanded uncertainty U95 (about 95 % "
                "coverage), propagated linearly from the reconciled covariance.",
            )
        )
        b.append(_table(res))
        if "efficiency" in figs:
            b.append(
                Block(
                    "figure",
                    "Efficiency against the Carnot and Curzon-Ahlborn bounds.",
                    figure="efficiency",
                )
            )
        if not data.corrections.empty:
            b.append(
                Block(
                    "p",
                    "Corrections to reference conditions (condition and reference "
                    "in SI units; factor divides the measured result):",
                )
            )
            b.append(_table(data.corrections))
        if not data.monte_carlo.empty:
            mc = data.monte_carlo.reset_index()
            b.append(
                Block(
                    "p",
                    "Monte Carlo check of the linear propagation (SI units; ratio "
                    "= Monte Carlo u / linear u):",
                )
            )
            b.append(_table(mc))

    # ---- budgets
    if data.budgets:
        b.append(Block("h2", "Uncertainty budget"))
        if "budget" in figs:
            b.append(
                Block(
                    "figure", "Share of the variance of the first-law efficiency.", figure="budget"
                )
            )
        for name in ("first_law_efficiency", "heat_rate", "corrected_net_power"):
            bt = T.budget_table(data, name, top=10)
            if not bt.empty:
                b.append(
                    Block("p", f"{name} (contribution in {bt.attrs.get('unit', '')}, share in %):")
                )
                b.append(_table(bt))

    # ---- exergy
    et = T.exergy_table(data)
    if not et.empty:
        b.append(Block("h2", "Energy and exergy"))
        if "flows" in figs:
            b.append(
                Block(
                    "figure",
                    "Energy and exergy of the fuel, and exergy destroyed per unit.",
                    figure="flows",
                )
            )
        b.append(
            Block(
                "p",
                "Exergy balance per unit in MW (share in % of the fuel exergy); "
                "gouy_stodola = T0 x entropy generation, which must match 'destroyed' "
                "where the energy balance closes.",
            )
        )
        b.append(_table(et))
        if data.exergy_losses:
            b.append(
                Block(
                    "list",
                    items=[
                        f"Exergy lost, {k}: {fmt(v / 1e6)} MW"
                        for k, v in data.exergy_losses.items()
                    ],
                )
            )

    # ---- guarantees
    gtab = T.guarantees_table(data)
    if not gtab.empty:
        b.append(Block("h2", "Guarantees"))
        statements = [
            f"{q}: {st}"
            for q, st in zip(
                data.guarantees["quantity"],
                data.guarantees.get("rule_statement", [""] * len(data.guarantees)),
                strict=True,
            )
            if isinstance(st, str) and st
        ]
        if not statements:
            statements = [
                "A verdict is given only when the corrected value +- U95 lies "
                "wholly on one side of the guaranteed value; otherwise it is "
                "inconclusive."
            ]
        b.append(Block("p", "Verdict rule (chosen in the plant file):"))
        b.append(Block("list", items=statements))
        b.append(_table(gtab, [v != "met" for v in gtab["verdict"]]))

    # ---- notes, log, timings
    if data.notes:
        b.append(Block("h2", "Notes"))
        b.append(Block("list", items=list(data.notes)))
    if data.audit:
        from perftest.report.audit import audit_lines

        b.append(Block("h2", "Audit record"))
        b.append(
            Block(
                "p",
                "What was done to the data and with what: input file fingerprints, "
                "samples excluded, outliers rejected, instruments dropped, unit "
                "conversions, options and software versions.",
            )
        )
        b.append(Block("list", items=audit_lines(data.audit)))
    if data.log:
        b.append(Block("h2", "Audit trail"))
        b.append(Block("list", items=list(data.log)))
    tt = T.timings_table(data)
    if not tt.empty:
        b.append(Block("h2", "Run time"))
        b.append(_table(tt, percent=("share",)))
    return b
