"""Tables, Markdown and JSON of a pre-test uncertainty plan, and ``perftest plan``.

The tables show results in their display units (MW, %, kJ/kWh), instrument shares
in percent of a result's variance, and the what-if of upgrading one instrument.
"""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path

import pandas as pd

from perftest.errors import IndistinguishableWarning, PerftestError

__all__ = [
    "results_table",
    "ranking_table",
    "what_if_table",
    "indistinguishable_table",
    "plan_text",
    "plan_markdown",
]

#: How many instruments the summary tables name per result.
TOP = 5

#: The caution printed with every plan.
PLAN_CAUTION = (
    "A pre-test prediction supports, and does not replace, the pre-test uncertainty "
    "analysis of the applicable test code, local regulations and the judgement of "
    "licensed engineers; it holds only for the design point, instruments and test "
    "duration stated in the plant file."
)


def _display(name: str, si_unit: str):
    from perftest.report.tables import result_display

    return result_display(name, si_unit)


def results_table(tp) -> pd.DataFrame:
    """Predicted results in display units.

    Columns ``result, value, unit, U95_with, U95_without, ratio, U95_allowed,
    within_allowed``; ``ratio`` is U95 with reconciliation over U95 without.
    """
    rows = []
    for name, r in tp.results.iterrows():
        unit, scale, offset = _display(name, r["unit"])
        rows.append(
            dict(
                result=name,
                value=r["value"] * scale + offset,
                unit=unit,
                U95_with=r["U95_with"] * abs(scale),
                U95_without=r["U95_without"] * abs(scale),
                ratio=r["ratio"],
                U95_allowed=r["U95_allowed"] * abs(scale),
                within_allowed=r["within_allowed"],
            )
        )
        if "U95_mean" in r.index:
            rows[-1][f"U95_mean_of_{int(r['runs'])}_runs"] = r["U95_mean"] * abs(scale)
    return pd.DataFrame(rows)


def ranking_table(tp, *, top: int | None = TOP) -> pd.DataFrame:
    """Per result, the instruments with the largest share of its variance.

    Columns ``result, rank, instrument, share_with, share_without`` (percent).
    """
    rows = []
    for name in tp.results.index:
        w = tp.ranking(name)["share"]
        wo = tp.ranking(name, reconciled=False)["share"]
        for rank, (inst, s) in enumerate(w.items(), start=1):
            if top is not None and rank > top:
                break
            rows.append(
                dict(
                    result=name,
                    rank=rank,
                    instrument=inst,
                    share_with=100.0 * s,
                    share_without=100.0 * float(wo.get(inst, 0.0)),
                )
            )
    return pd.DataFrame(rows)


def what_if_table(tp, *, best_only: bool = False) -> pd.DataFrame:
    """Predicted U95 after upgrading one instrument, in display units.

    Columns ``result, instrument, unit, U95_with, U95_with_upgraded, change_with,
    U95_without_upgraded`` (``change_with`` in percent).  With ``best_only`` one row
    per result: the upgrade that helps most.
    """
    w = tp.what_if
    if w.empty:
        return pd.DataFrame()
    rows = []
    for r in w.itertuples(index=False):
        unit, scale, _ = _display(r.result, tp.results.loc[r.result, "unit"])
        s = abs(scale)
        rows.append(
            dict(
                result=r.result,
                instrument=r.instrument,
                unit=unit,
                U95_with=r.U95_with * s,
                U95_with_upgraded=r.U95_with_upgraded * s,
                change_with=100.0 * (r.U95_with_upgraded / r.U95_with - 1.0)
                if r.U95_with > 0
                else math.nan,
                U95_without_upgraded=r.U95_without_upgraded * s,
            )
        )
    out = pd.DataFrame(rows)
    if best_only:
        out = out.loc[out.groupby("result", sort=False)["change_with"].idxmin()]
    return out.reset_index(drop=True)


def indistinguishable_table(tp) -> pd.DataFrame:
    """Sets of planned instruments no measurement test can tell apart.

    Columns ``set, kind, tags, min_correlation, separating_z``; ``tags`` joined by
    commas, ``separating_z`` the measurement-test statistic a gross error must reach
    before the test can prefer one member ("never" for identical sets).
    """
    sets = getattr(tp, "indistinguishable", None)
    if sets is None or sets.empty:
        return pd.DataFrame(columns=["set", "kind", "tags", "min_correlation", "separating_z"])
    return pd.DataFrame(
        dict(
            set=sets["set"].astype(int).to_numpy(),
            kind=sets["kind"].to_numpy(),
            tags=[", ".join(t) for t in sets["tags"]],
            min_correlation=[f"{v:.6f}" for v in sets["min_correlation"]],
            separating_z=[
                "never" if not math.isfinite(z) else f"{z:.0f}" for z in sets["separating_z"]
            ],
        )
    )


def _g(v) -> str:
    from perftest.report.document import fmt

    return fmt(v, short=True)


def _duration(seconds: float) -> str:
    td = pd.Timedelta(seconds=float(seconds))
    return str(td).replace("0 days ", "")


def _intervals(tp) -> str:
    n = tp.instruments["n_samples"]
    return f"{int(n.min())} to {int(n.max())} samples per tag" if len(n) else ""


def _allowed_text(r) -> str:
    if r.within_allowed is None or (isinstance(r.within_allowed, float)):
        return "-"
    return f"{_g(r.U95_allowed)} ({'reached' if r.within_allowed else 'NOT reached'})"


def plan_text(tp, title: str = "") -> str:
    """The plan as readable text for a terminal."""
    from perftest.report.document import fmt_uncertain

    lines = [title or "Pre-test uncertainty plan"]
    lines.append(
        f"  planned test      {_duration(tp.duration)}, {_intervals(tp)}; "
        f"U95 at {tp.level * 100:g} % coverage"
    )
    res = results_table(tp)
    lines.append("")
    lines.append(
        f"  {'result':<28}{'value':>12} {'unit':<8}{'U95 reconciled':>16}"
        f"{'U95 as measured':>17}  allowed"
    )
    for r in res.itertuples(index=False):
        value, _ = fmt_uncertain(r.value, r.U95_with)
        lines.append(
            f"  {r.result:<28}{value:>12} {r.unit:<8}{_g(r.U95_with):>16}"
            f"{_g(r.U95_without):>17}  {_allowed_text(r)}"
        )
    if "U95_mean" in tp.results:
        n = int(tp.results["runs"].iloc[0])
        lines.append("")
        lines.append(f"  mean of {n} repeated runs (systematic parts shared, random parts / {n}):")
        col = f"U95_mean_of_{n}_runs"
        for r in res.to_dict("records"):
            lines.append(f"  {r['result']:<28}{'':>12} {r['unit']:<8}{_g(r[col]):>16}")
    lines.append("")
    lines.append("  largest shares of the variance (with reconciliation):")
    rank = ranking_table(tp, top=3)
    for name in tp.results.index:
        part = rank[rank["result"] == name]
        items = ", ".join(
            f"{i} {s:.0f} %" for i, s in zip(part.instrument, part.share_with, strict=True)
        )
        lines.append(f"    {name:<26} {items}")
    best = what_if_table(tp, best_only=True)
    if not best.empty:
        lines.append("")
        lines.append(
            f"  best single upgrade (systematic uncertainty x {tp.upgrade_factor:g}), "
            "with reconciliation:"
        )
        for r in best.itertuples(index=False):
            lines.append(
                f"    {r.result:<26} {r.instrument:<10} U95 {_g(r.U95_with)} -> "
                f"{_g(r.U95_with_upgraded)} {r.unit} ({r.change_with:+.1f} %)"
            )
    sets = indistinguishable_table(tp)
    if not sets.empty:
        lines.append("")
        lines.append(
            "  instruments no measurement test can tell apart (a gross error is not located):"
        )
        for r in sets.itertuples(index=False):
            when = (
                "never separable"
                if r.separating_z == "never"
                else f"separable only above a statistic of {r.separating_z}"
            )
            lines.append(f"    set {r.set}, {r.kind} ({when}): {r.tags}")
    for note in tp.notes:
        lines.append(f"  note: {note}")
    lines.append("")
    lines.append(f"  {PLAN_CAUTION}")
    return "\n".join(lines) + "\n"


def _md_table(df: pd.DataFrame) -> str:
    from perftest.report.document import fmt

    if df.empty:
        return "(none)\n"
    cols = list(df.columns)
    out = ["| " + " | ".join(cols) + " |", "|" + "---|" * len(cols)]
    for row in df.itertuples(index=False):
        out.append(
            "| "
            + " | ".join(
                fmt(v, short=c.startswith(("U95", "u_", "share", "change", "ratio")))
                for c, v in zip(cols, row, strict=True)
            )
            + " |"
        )
    return "\n".join(out) + "\n"


def plan_markdown(tp, title: str = "") -> str:
    """The plan as a Markdown document (all tables)."""
    doc = [f"# {title or 'Pre-test uncertainty plan'}", "", f"> {PLAN_CAUTION}", ""]
    doc += [
        f"Planned test: {_duration(tp.duration)} ({_intervals(tp)}). Expanded uncertainties "
        f"U95 at {tp.level * 100:g} % coverage, predicted at the design point of the plant "
        "file with the planned instruments, with reconciliation (the design-point "
        "measurements reconciled with the plant model) and as measured (no reconciliation).",
        "",
        "## Predicted results",
        "",
        _md_table(results_table(tp)),
        "## Instruments",
        "",
        "Systematic and random standard uncertainty of each planned mean (SI units); "
        "n_effective is the number of independent samples the mean is worth.",
        "",
        _md_table(
            tp.instruments.reset_index()[
                ["tag", "quantity", "value", "u_systematic", "u_random", "n_samples", "n_effective"]
            ]
        ),
        "## Share of each result's variance (%)",
        "",
        _md_table(ranking_table(tp, top=None)),
    ]
    wf = what_if_table(tp)
    if not wf.empty:
        doc += [
            f"## Upgrading one instrument (systematic uncertainty x {tp.upgrade_factor:g})",
            "",
            _md_table(wf[wf["change_with"].abs() > 0.05]),
            "Rows that change a result's U95 by less than 0.05 % are left out.",
            "",
        ]
    sets = indistinguishable_table(tp)
    if not sets.empty:
        doc += [
            "## Instruments no test can tell apart",
            "",
            "Each set's instruments enter the balances in the same way (identical) or "
            "almost (near): a gross error in one gives the others the same measurement-test "
            "statistic, so it is detected but not located. separating_z is the statistic a "
            "gross error must reach before the test can prefer one member. Add or move an "
            "instrument so that it enters another balance, or mark the instruments to trust "
            "(trusted = true).",
            "",
            _md_table(sets),
        ]
    if tp.notes:
        doc += ["## Notes", ""] + [f"- {n}" for n in tp.notes] + [""]
    return "\n".join(doc)


def plan_json(tp, title: str = "") -> str:
    """The plan as JSON text (SI values)."""
    data = {"plant": title, "caution": PLAN_CAUTION, **tp.to_dict()}
    return json.dumps(data, indent=2, allow_nan=False) + "\n"


def run_plan_command(args, out=None) -> int:
    """``perftest plan``: predict, print, and write the chosen files."""
    import sys

    from perftest.planning.prediction import plan
    from perftest.plant.file import load_plant

    path = Path(args.plant)
    if not path.is_file():
        raise PerftestError(f"{path}: plant file not found.", file=path)
    from perftest.report.output import check_outputs, write_atomic

    check_outputs({"--json": args.json, "--markdown": args.markdown}, {"plant file": [path]})
    plant = load_plant(path)
    with warnings.catch_warnings():
        # the printed plan lists the sets itself (indistinguishable_table)
        warnings.simplefilter("ignore", IndistinguishableWarning)
        tp = plan(
            plant,
            duration=args.duration,
            interval=args.interval,
            upgrade_factor=args.upgrade_factor,
            what_if=not args.no_what_if,
            runs=getattr(args, "runs", None),
        )
    write = (out or sys.stdout).write
    write(plan_text(tp, plant.name))
    for target, text in ((args.json, plan_json), (args.markdown, plan_markdown)):
        if target:
            write_atomic(target, text(tp, plant.name))
            write(f"  wrote             {target}\n")
    return 0
