"""The report's content, once, for both the Markdown and the HTML writer.

:func:`sections` turns a :class:`ReportData` into an ordered list of blocks
(headings, paragraphs, tables, figures, warnings).  The writers only decide how a
block looks, so both reports always say the same thing.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import pandas as pd

from perftest import display as D
from perftest.report import tables as T
from perftest.report.data import CAUTION, ReportData

__all__ = ["Block", "sections", "fmt", "fmt_uncertain", "present", "guarantee_lines"]


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


def fmt(v, short: bool = False) -> str:
    """Format a number for a table: 4 significant digits (2 for uncertainties), no
    e-notation (:func:`perftest.display.fmt_number`)."""
    if isinstance(v, int) and not isinstance(v, bool):
        return str(v)
    return D.fmt_number(v, 2 if short else 4)


def fmt_uncertain(value, U) -> tuple[str, str]:
    """Value and expanded uncertainty rounded together: U to 2 significant digits,
    the value to the same decimal place (GUM 7.2.6)."""
    return D.fmt_uncertain(value, U)


# ---------------------------------------------------------------- presentation
# A column of a shown table: (key in the numeric table, heading in words, format).
# Formats: "text", "num" (4 significant digits), "u" (2 significant digits),
# ("by", col) (rounded to the decimal place of two significant digits of column
# col of the same row), "dof", "int", "yesno", "pct" (1 decimal), "z" (2 decimals).


def _cell(v, kind, row) -> str:
    if kind == "text":
        if v is None or (isinstance(v, float) and math.isnan(v)):
            return ""
        return str(v)
    if isinstance(kind, tuple) and kind[0] == "by":
        if isinstance(v, tuple):
            return " & ".join(D.fmt_number(x) for x in v)
        return D.fmt_fixed(v, D.decimals_for(row.get(kind[1])))
    if isinstance(v, tuple):
        return " & ".join(D.fmt_number(x) for x in v)
    if kind == "num":
        return D.fmt_number(v, 4)
    if kind == "u":  # two significant digits, integer digits rounded too (119 -> 120)
        return D.fmt_u(v)
    if kind == "plain":  # a stated number (guarantee, reference) as written
        return D.fmt_plain(v)
    if kind == "dof":
        return D.fmt_dof(v)
    if kind == "int":
        try:
            return str(int(v))
        except (TypeError, ValueError):
            return D.NO_UNIT
    if kind == "yesno":
        if v is None or (isinstance(v, float) and math.isnan(v)):
            return D.NO_UNIT
        return "yes" if bool(v) else "no"
    if kind == "pct":
        return D.fmt_fixed(v, 1)
    if kind == "z":
        return D.fmt_fixed(v, 2)
    return D.fmt_number(v)


def present(df: pd.DataFrame, spec) -> pd.DataFrame:
    """A numeric table as the strings a report shows, with headings in words."""
    cols = [(k, h, f) for k, h, f in spec if k in df.columns or callable(f)]
    out = {h: [] for _, h, _ in cols}
    for row in df.to_dict("records"):
        for k, h, f in cols:
            out[h].append(f(row) if callable(f) else _cell(row.get(k), f, row))
    return pd.DataFrame(out, columns=[h for _, h, _ in cols])


def _table(df: pd.DataFrame, spec, flags=None) -> Block:
    return Block("table", table=present(df, spec), flags=list(flags or [False] * len(df)))


def _unit(u) -> str:
    return D.unit_label(u)


def _flags_text(row) -> str:
    words = []
    if row.get("eliminated"):
        words.append("dropped")
    elif row.get("suspect"):
        words.append("suspect")
    if row.get("redundant"):
        words.append("redundant")
    return ", ".join(words) if words else "–"


_HEADLINE = (
    "net_power",
    "heat_input",
    "first_law_efficiency",
    "heat_rate",
    "cooling_capacity",
    "heating_capacity",
    "cop",
    "carnot_cop",
    "heat_export",
    "fuel_utilisation",
    "boiler_efficiency",
    "boiler_efficiency_direct",
    "boiler_efficiency_indirect",
    "carnot_efficiency",
    "second_law_efficiency",
)


def _headline_names(res: pd.DataFrame) -> list:
    names = [n for n in _HEADLINE if n in res.index]
    names += [n for n in res.index if str(n).startswith("corrected_") and n not in names]
    return names


_DIRECTION = {"at least": "≥", "at most": "≤"}


def guarantee_lines(data: ReportData) -> list:
    """One sentence per guarantee: value ± U95 against the guarantee, and the verdict."""
    gt = T.guarantees_table(data)
    out = []
    for r in gt.to_dict("records"):
        v, U = D.fmt_uncertain(r["corrected_value"], r["U95"])
        unit = "" if r["unit"] in ("1", "") else _unit(r["unit"])
        sign = _DIRECTION.get(r["direction"], r["direction"])
        text = (
            f"Guarantee {r['quantity']}: {v} ± {U} {unit} (U95) against {sign} "
            f"{D.fmt_plain(r['guaranteed'])} {unit}: {r['verdict']} (rule {r['rule']})"
        )
        out.append(" ".join(text.split()).replace(" :", ":"))
    return out


def _describe(data: ReportData, name: str) -> str:
    res = data.results
    if name in res.index and isinstance(res.loc[name].get("description"), str):
        return f"{res.loc[name, 'description']} ({name})"
    return str(name)


def _headline(data: ReportData) -> list:
    res = data.results
    items = []
    for name in _headline_names(res):
        r = res.loc[name]
        unit, scale, off = T.result_display(name, r["unit"], r["value"])
        v, u = fmt_uncertain(r["value"] * scale + off, r["U95"] * abs(scale))
        unit = "" if unit == "1" else _unit(unit)
        items.append(f"{r.get('description', name)}: {v} ± {u} {unit} (U95)".replace("  ", " "))
    items += guarantee_lines(data)
    gt = data.global_test
    if gt and gt.get("chi2") is not None:
        items.append(
            f"Global test: chi² = {fmt(gt['chi2'], True)} with {gt['dof']} degrees of freedom, "
            f"p = {fmt(gt['p_value'], True)} ({'passed' if gt['passed'] else 'failed'})"
        )
    return items


def _meta_block(data: ReportData) -> list:
    meta = dict(data.meta)
    if not meta:
        w = data.window
        meta["Plant"] = data.title
        if w.get("start"):
            meta["Window"] = f"{w.get('start')} to {w.get('end')}"
        if w.get("how"):
            meta["Window chosen"] = w["how"]
    meta["Software"] = f"perftest {data.version}" if data.version else "perftest"
    table = pd.DataFrame({"item": list(meta), "value": [str(v) for v in meta.values()]})
    return [Block("table", text="meta", table=table, flags=[False] * len(table))]


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
    b.append(Block("h2", "Test particulars"))
    b.extend(_meta_block(data))
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

    # ---- conditions
    ct = T.conditions_table(data)
    if not ct.empty:
        b.append(Block("h2", "Test conditions and reference conditions"))
        b.append(
            Block(
                "p",
                "Conditions during the test (reconciled where the balances include them) "
                "against the reference conditions the results are corrected to.",
            )
        )
        ct["unit"] = ct["unit"].map(_unit)
        b.append(
            _table(
                ct,
                [
                    ("variable", "condition", "text"),
                    ("test", "during the test", ("by", "U95")),
                    ("U95", "U95", "u"),
                    ("reference", "reference", "plain"),
                    ("deviation", "test − reference", ("by", "U95")),
                    ("unit", "unit", "text"),
                ],
            )
        )

    # ---- window, stability, exclusions
    b.append(Block("h2", "Test window and stability"))
    pages = sorted(
        (f for f in figs if f == "stability" or f.startswith("stability_")),
        key=lambda f: 1 if f == "stability" else int(f.rsplit("_", 1)[1]),
    )
    for i, stem in enumerate(pages, 1):
        more = f" (page {i} of {len(pages)})" if len(pages) > 1 else ""
        b.append(
            Block(
                "figure",
                "Trends over the whole run; the averaged window is shaded and the "
                "permissible variation about the window mean is drawn as a band (a tag "
                f"outside it is not steady){more}.",
                figure=stem,
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
        st["unit"] = st["unit"].map(_unit)
        b.append(
            _table(
                st,
                [
                    ("tag", "tag", "text"),
                    ("mean", "mean", ("by", "permissible")),
                    ("max_deviation", "largest deviation", "u"),
                    ("drift", "drift", "u"),
                    ("permissible", "permissible variation", "u"),
                    ("unit", "unit", "text"),
                    ("ratio", "ratio", "z"),
                    ("passed", "steady", "yesno"),
                ],
                failed,
            )
        )
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
        for c in ("first", "last"):
            if c in ex.columns:
                ex[c] = [_short_time(t) for t in ex[c]]
        b.append(
            _table(
                ex,
                [
                    ("tag", "tag", "text"),
                    ("reason", "reason", "text"),
                    ("count", "samples", "int"),
                    ("first", "first", "text"),
                    ("last", "last", "text"),
                ],
            )
        )

    # ---- measurements
    mt = T.measurements_table(data)
    if not mt.empty:
        b.append(Block("h2", "Averaged measurements"))
        b.append(
            Block(
                "p",
                "Mean over the window with random (autocorrelation-corrected) "
                "and systematic standard uncertainties, in the logged units; U95 = k·u "
                "with the Student t factor of the degrees of freedom (k = 1.96 for "
                "many), before reconciliation.",
            )
        )
        mt["unit"] = mt["unit"].map(_unit)
        b.append(
            _table(
                mt,
                [
                    ("tag", "tag", "text"),
                    ("quantity", "quantity", "text"),
                    ("mean", "mean", ("by", "U95")),
                    ("U95", "U95", "u"),
                    ("unit", "unit", "text"),
                    ("u_random", "u random", "u"),
                    ("u_systematic", "u systematic", "u"),
                    ("dof", "degrees of freedom", "dof"),
                    ("n_samples", "samples", "int"),
                    ("n_excluded", "excluded", "int"),
                ],
            )
        )

    # ---- reconciliation
    rt = T.reconciliation_table(data)
    if not rt.empty:
        b.append(Block("h2", "Reconciliation"))
        gt = data.global_test or {}
        if gt.get("chi2") is not None:
            b.append(
                Block(
                    "p",
                    f"Global test: chi² = {fmt(gt['chi2'], True)}, {gt['dof']} degrees of "
                    f"freedom, p = {fmt(gt['p_value'], True)}; "
                    f"{'passed' if gt['passed'] else 'failed'} at alpha = {data.alpha:g}. "
                    f"Measurement test critical value |z| = {data.critical_z:.2f}.",
                )
            )
        if data.eliminated:
            el = pd.DataFrame(data.eliminated)
            if "shared" in el:
                # a shared step drops no instrument: the tied instruments keep their
                # readings and the bias they share is taken out
                el["tag"] = [
                    f"none ({r['tag']} and tied: shared bias taken out)"
                    if r["shared"]
                    else r["tag"]
                    for _, r in el.iterrows()
                ]
            b.append(Block("p", "Serial elimination (instruments dropped, in order):"))
            b.append(
                _table(
                    el,
                    [
                        ("tag", "tag dropped", "text"),
                        ("z", "|z| before the step", lambda r: D.fmt_fixed(abs(r["z"]), 2)),
                        ("chi2", "chi² before the step", "num"),
                        ("dof", "degrees of freedom", "int"),
                        ("p_value", "p before the step", "u"),
                        ("tied_with", "tied with", "text"),
                    ],
                )
            )
            if any(e.get("shared") for e in data.eliminated):
                lost = sum(int(e.get("redundancy_lost", 0)) for e in data.eliminated)
                b.append(
                    Block(
                        "warning",
                        "Where a step lists instruments it is tied with, the tests cannot "
                        "tell which of them is faulty (equal statistics, or statistics "
                        "within their sampling spread). None of them was dropped: the "
                        "bias they share was taken out instead, at the cost of "
                        f"{lost} degree(s) of freedom of the global test. Results that "
                        "depend on which instrument is at fault are flagged by "
                        "rec.choice_spread(); check all of them before accepting the "
                        "result.",
                    )
                )
            elif any(e.get("tied_with") for e in data.eliminated):
                b.append(
                    Block(
                        "warning",
                        "Where a step lists instruments it is tied with, their "
                        "measurement-test statistics are close: check all of them "
                        "before accepting the result.",
                    )
                )
        if "reconciliation" in figs:
            b.append(
                Block(
                    "figure",
                    "Adjustments with their U95 and measurement-test statistics.",
                    figure="reconciliation",
                )
            )
        b.append(
            Block(
                "p",
                "U95 = 1.96·u throughout this table, without and with reconciliation; "
                "adjustment = reconciled − measured.",
            )
        )
        rt["unit"] = rt["unit"].map(_unit)
        rt["U95_measured"] = 1.959963984540054 * rt["u_measured"]
        rt["U95_reconciled"] = 1.959963984540054 * rt["u_reconciled"]
        b.append(
            _table(
                rt,
                [
                    ("tag", "tag", "text"),
                    ("measured", "measured", ("by", "U95_measured")),
                    ("U95_measured", "U95 without reconciliation", "u"),
                    ("reconciled", "reconciled", ("by", "U95_reconciled")),
                    ("U95_reconciled", "U95 with reconciliation", "u"),
                    ("adjustment", "adjustment", ("by", "U95_reconciled")),
                    ("unit", "unit", "text"),
                    ("z", "z", "z"),
                    ("flags", "flags", _flags_text),
                ],
                list(rt["suspect"] | rt["eliminated"]),
            )
        )
        cl = T.closure_table(data)
        if not cl.empty:
            b.append(Block("p", "Balance closure at the reconciled values (should be ~0):"))
            b.append(
                _table(
                    cl,
                    [
                        ("equipment", "equipment", "text"),
                        ("type", "type", "text"),
                        ("mass_imbalance", "mass imbalance [kg/s]", "num"),
                        ("energy_imbalance", "energy imbalance [kW]", "num"),
                        ("energy_throughput", "energy throughput [MW]", "num"),
                    ],
                )
            )

    # ---- results
    res = T.results_table(data)
    if not res.empty:
        b.append(Block("h2", "Results"))
        b.append(
            Block(
                "p",
                "Expanded uncertainty U95 (about 95 % coverage, k from the effective "
                "degrees of freedom) and standard uncertainty u, propagated linearly "
                "from the reconciled covariance; values rounded to two significant "
                "digits of U95.",
            )
        )
        res["unit"] = res["unit"].map(_unit)
        b.append(
            _table(
                res,
                [
                    ("description", "result", "text"),
                    ("value", "value", ("by", "U95")),
                    ("U95", "U95", "u"),
                    ("unit", "unit", "text"),
                    ("u", "u", "u"),
                    ("name", "name", "text"),
                ],
            )
        )
        if "efficiency" in figs:
            b.append(
                Block(
                    "figure",
                    "Efficiency against the Carnot and Curzon-Ahlborn bounds.",
                    figure="efficiency",
                )
            )
        cor = T.corrections_table(data)
        if not cor.empty:
            b.append(Block("h2", "Corrections to reference conditions"))
            b.append(
                Block(
                    "p",
                    "Condition and reference in the variable's unit; a multiplicative "
                    "factor divides the measured result, an additive one is subtracted; "
                    "change = what this correction alone changes the result by.",
                )
            )
            cor["unit"] = cor["unit"].map(_unit)
            cor["change_unit"] = cor["change_unit"].map(_unit)
            b.append(
                _table(
                    cor,
                    [
                        ("result", "result", "text"),
                        ("variable", "condition", "text"),
                        ("condition", "during the test", "num"),
                        ("reference", "reference", "plain"),
                        ("unit", "unit", "text"),
                        ("kind", "kind", "text"),
                        ("factor", "factor or offset", "num"),
                        ("change", "change", "num"),
                        ("change_unit", "unit of change", "text"),
                        ("relative_change", "change [%]", "u"),
                    ],
                )
            )
        mc = T.monte_carlo_table(data)
        if not mc.empty:
            b.append(Block("h2", "Monte Carlo check"))
            b.append(
                Block(
                    "p",
                    "The linear propagation checked by Monte Carlo (JCGM 101:2008, seeded "
                    "draws from the reconciled covariance): the shortest coverage interval "
                    "of the draws at the evaluation's coverage level (95 %) against the "
                    "linear interval y ± U95, and the larger difference of their ends in % "
                    "of U95. A few per cent is the sampling noise of the draws; a large "
                    "difference means the linear propagation misjudges the result.",
                )
            )
            mc["unit"] = mc["unit"].map(_unit)
            b.append(
                _table(
                    mc,
                    [
                        ("name", "result", "text"),
                        ("low", "Monte Carlo 95 % interval", _interval("low", "high")),
                        ("linear_low", "linear y ± U95", _interval("linear_low", "linear_high")),
                        ("unit", "unit", "text"),
                        ("u", "u Monte Carlo", "u"),
                        ("u_linear", "u linear", "u"),
                        ("ratio", "u ratio", "z"),
                        ("end_difference", "end difference [% of U95]", "pct"),
                    ],
                )
            )

    # ---- budgets
    names = T.budget_results(data)
    if names:
        b.append(Block("h2", "Uncertainty budgets"))
        if "budget" in figs:
            b.append(
                Block(
                    "figure",
                    f"Share of the variance of the {names[0].replace('_', ' ')}.",
                    figure="budget",
                )
            )
        for name in names:
            bt = T.budget_table(data, name, top=10)
            if bt.empty:
                continue
            ru = _unit(bt.attrs.get("unit", ""))
            b.append(Block("p", f"{_describe(data, name)}; contributions in {ru}:"))
            bt["unit"] = bt["unit"].map(_unit)
            b.append(
                _table(
                    bt,
                    [
                        ("input", "input", "text"),
                        ("estimate", "estimate", ("by", "u")),
                        ("u", "u", "u"),
                        ("unit", "unit", "text"),
                        ("sensitivity", f"sensitivity [{ru} per input unit]", "u"),
                        ("u_contribution", f"contribution [{ru}]", "u"),
                        ("share", "share of variance [%]", "pct"),
                    ],
                )
            )

    # ---- exergy
    et = T.exergy_table(data)
    if not et.empty:
        b.append(Block("h2", "Energy and exergy"))
        if "flows" in figs:
            b.append(
                Block(
                    "figure",
                    "Energy and exergy of the fuel, and exergy destroyed per piece of equipment.",
                    figure="flows",
                )
            )
        b.append(
            Block(
                "p",
                "Exergy balance per piece of equipment; Gouy-Stodola = T0 × entropy "
                "generation, which must match the exergy destroyed where the energy "
                "balance closes; share in % of the fuel exergy.",
            )
        )
        b.append(
            _table(
                et,
                [
                    ("equipment", "equipment", "text"),
                    ("type", "type", "text"),
                    ("exergy_in", "exergy in [MW]", "num"),
                    ("exergy_out", "exergy out [MW]", "num"),
                    ("work_in", "work in [MW]", "num"),
                    ("work_out", "work out [MW]", "num"),
                    ("heat", "heat [MW]", "num"),
                    ("destroyed", "exergy destroyed [MW]", "num"),
                    ("u_destroyed", "u destroyed [MW]", "u"),
                    ("gouy_stodola", "Gouy-Stodola [MW]", "num"),
                    ("share", "share [%]", "pct"),
                ],
            )
        )
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
        b.append(Block("list", items=guarantee_lines(data)))
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
                "A verdict is given only when the corrected value ± U95 lies "
                "wholly on one side of the guaranteed value; otherwise it is "
                "inconclusive."
            ]
        b.append(Block("p", "Verdict rule (chosen in the plant file):"))
        b.append(Block("list", items=[s.replace("+-", "±") for s in statements]))
        gtab["unit"] = gtab["unit"].map(_unit)
        b.append(
            _table(
                gtab,
                [
                    ("quantity", "result", "text"),
                    ("corrected_value", "corrected value", ("by", "U95")),
                    ("U95", "U95", "u"),
                    ("direction", "guarantee", "text"),
                    ("guaranteed", "guaranteed value", "plain"),
                    ("unit", "unit", "text"),
                    ("verdict", "verdict", "text"),
                    ("rule", "rule", "text"),
                ],
                [v != "met" for v in gtab["verdict"]],
            )
        )

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
        b.append(
            _table(
                tt,
                [
                    ("stage", "stage", "text"),
                    ("seconds", "time [s]", lambda r: D.fmt_fixed(r["seconds"], 2)),
                    ("share", "share [%]", "pct"),
                ],
            )
        )
    return b


def _interval(lo: str, hi: str):
    def cell(row) -> str:
        d = D.decimals_for(row.get("u_linear"))
        d = None if d is None else d + 1
        return f"{D.fmt_fixed(row[lo], d)} to {D.fmt_fixed(row[hi], d)}"

    return cell


def _short_time(t) -> str:
    try:
        return f"{pd.Timestamp(t):%Y-%m-%d %H:%M:%S}"
    except (TypeError, ValueError):
        return str(t)
