"""Results over time: the trend figure of a :func:`perftest.reconcile_many` table.

One panel per headline result of the plant's kind on one time axis (power: net
power, heat input, first-law efficiency, heat rate, Carnot bound, second-law
efficiency; refrigeration: cooling capacity, power input, COP, Carnot COP,
second-law efficiency; see :data:`perftest.evaluation.plant_keys.KEY_RESULTS`),
then a strip of suspect instruments:

* each result of each window with its expanded uncertainty band
  (:math:`\\pm 1.96\\,u`, :data:`COVERAGE_FACTOR`), windows whose global test failed
  marked, unstable windows grey, windows without a result (failed or skipped) as
  faint vertical lines;
* the instruments flagged suspect (or dropped by serial elimination) in each window:
  one row per tag, a mark where the tag was suspect.

Same look as :mod:`perftest.report.figures` (Agg canvas, no pyplot state).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perftest.display.format import COLOURS
from perftest.report.figures import _BAD, _GREY, _OK, _figure

__all__ = ["trend_figure", "trend_results", "COVERAGE_FACTOR"]

#: Coverage factor of the U95 band: 1.96, the 95 % quantile of the normal
#: distribution, as in every other U95 of the reports (windows of many samples: the
#: Student t factor is within 0.12 % of the normal one past 1000 degrees of freedom).
COVERAGE_FACTOR = 1.959963984540054

_MAX_TAG_ROWS = 12


def suspect_texts(table: pd.DataFrame) -> list[str]:
    """The ``suspects`` column as text, "" where empty (a CSV gives nan or floats)."""
    return ["" if pd.isna(v) else str(v) for v in table["suspects"]]


def _suspect_tags(table: pd.DataFrame) -> list[str]:
    counts: dict = {}
    for text in suspect_texts(table):
        for tag in [t.strip() for t in str(text).split(",") if t.strip()]:
            counts[tag] = counts.get(tag, 0) + 1
    return sorted(counts, key=lambda t: (-counts[t], t))


def trend_results(table: pd.DataFrame, kind: str | None = None) -> list[str]:
    """Headline results a window table holds (value and ``u_`` columns), in kind order.

    Parameters
    ----------
    table : pandas.DataFrame
        A :func:`perftest.reconcile_many` table.
    kind : str, optional
        Plant kind (``[performance] kind``).  Without it, the headline results of
        every kind that the table holds, in the order of
        :data:`~perftest.evaluation.plant_keys.KEY_RESULTS`.
    """
    from perftest.evaluation.plant_keys import KEY_RESULTS, key_results

    names = key_results(kind) if kind is not None else [n for k in KEY_RESULTS.values() for n in k]
    cols = set(table.columns)
    return [n for n in dict.fromkeys(names) if n in cols and f"u_{n}" in cols]


def _label(name: str) -> str:
    text = name.replace("_", " ").replace("cop", "COP").replace("second law", "second-law")
    return text.replace("carnot", "Carnot").replace("first law", "first-law")


def trend_figure(
    table: pd.DataFrame,
    *,
    title: str | None = None,
    tz: str | None = None,
    kind: str | None = None,
    results=None,
    spans=(),
):
    """Headline results and suspect instruments of each window over time.

    Parameters
    ----------
    table : pandas.DataFrame
        A :func:`perftest.reconcile_many` table with results: for each result shown a
        value column and its standard uncertainty ``u_<name>`` [SI].
    title : str, optional
    tz : str, optional
        Time zone of the time axis (default: that of ``start``).
    kind : str, optional
        Plant kind whose headline results are drawn (:func:`trend_results`).
    results : sequence of str, optional
        The results to draw instead (each needs its value and ``u_`` column).
    spans : sequence of (label, start, end), optional
        The test's repeated runs or load points (the plant file's ``[[runs]]`` or
        ``[[points]]``), shaded and labelled on every result axis.

    Returns
    -------
    matplotlib.figure.Figure
        One axes per result (in display units: MW, %, kJ/kWh, COP as a number), each
        with its U95 band and global-test failures; the last axes is the
        suspect-instrument strip.

    Raises
    ------
    InputError
        The table lacks the window columns, or holds none of the results (or a
        named result lacks its columns).
    """
    from perftest.display.format import unit_label
    from perftest.errors import InputError
    from perftest.evaluation.results import RESULT_UNITS
    from perftest.report.tables import result_display

    need = ["start", "end", "status", "passed", "suspects"]
    if results is not None:
        names = [results] if isinstance(results, str) else list(results)
        need += [c for n in names for c in (n, f"u_{n}")]
    missing = [c for c in need if c not in table.columns]
    if results is None:
        names = trend_results(table, kind)
        if not names:
            missing.append("a headline result and its u_ column")
    if missing:
        raise InputError(
            f"The 'table' parameter of trend_figure lacks columns {missing}; give a "
            "reconcile_many table computed with results (a plant with [performance]).",
            parameter="table",
        )
    t = (
        pd.DatetimeIndex(table["start"])
        + (pd.DatetimeIndex(table["end"]) - pd.DatetimeIndex(table["start"])) / 2
    )
    if tz is not None:
        t = t.tz_convert(tz)
    x = t.tz_localize(None).to_numpy()  # wall-clock time of the zone, for the axis
    status = table["status"].astype(str).to_numpy()
    passed = table["passed"].astype("boolean").to_numpy(dtype=bool, na_value=True)
    ok = status == "ok"
    tags = _suspect_tags(table)
    shown = tags[:_MAX_TAG_ROWS]
    heights = [2.2] * len(names) + [max(1.0, 0.28 * len(shown) + 0.5)]
    fig, axes = _figure(
        len(heights),
        1,
        size=(10.0, 1.5 + sum(heights)),
        sharex=True,
        gridspec_kw={"height_ratios": heights},
    )
    axes = list(np.atleast_1d(axes))  # at least one result panel and the strip
    axs = axes[-1]
    zone = str(t.tz) if len(t) else "UTC"

    for ax, name in zip(axes, names, strict=False):
        si = RESULT_UNITS.get(name.removeprefix("corrected_"), "1")
        v_si = table[name].to_numpy(dtype=float)
        finite = v_si[np.isfinite(v_si)]
        unit, scale, offset = result_display(
            name, si, float(np.median(finite)) if finite.size else None
        )
        v = v_si * scale + offset
        U = abs(scale) * COVERAGE_FACTOR * table[f"u_{name}"].to_numpy(dtype=float)
        has = np.isfinite(v)
        ax.fill_between(x, v - U, v + U, where=has & np.isfinite(U), color=_OK, alpha=0.2,
                        linewidth=0, label="U95 band (1.96·u)")  # fmt: skip
        ax.plot(x[has & ok], v[has & ok], ".", color=_OK, markersize=4, label="result of a window")
        other = has & ~ok
        if other.any():
            ax.plot(x[other], v[other], ".", color=_GREY, markersize=4,
                    label="unstable window (kept, not steady)")  # fmt: skip
        fail = has & ~passed
        if fail.any():
            ax.plot(x[fail], v[fail], "x", color=_BAD, markersize=5, label="global test failed")
        for xi in x[~has]:
            ax.axvline(xi, color=_GREY, alpha=0.25, linewidth=0.8)
        if (~has).any():
            ax.plot([], [], "|", color=_GREY, label="no result (skipped or failed)")
        for i, (label, t0, t1) in enumerate(spans):
            a, b = (pd.Timestamp(s).tz_convert(zone).tz_localize(None) for s in (t0, t1))
            ax.axvspan(a, b, color=COLOURS["window"], alpha=0.35, linewidth=0,
                       label="run or load point of the test" if i == 0 else None)  # fmt: skip
            if ax is axes[0]:
                ax.annotate(label, xy=(a + (b - a) / 2, 0.97), xycoords=("data", "axes fraction"),
                            ha="center", va="top", fontsize=8,
                            bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none",
                                  "alpha": 0.8})  # fmt: skip
        shown_unit = "–" if unit == "1" else unit_label(unit)
        ax.set_ylabel(f"{_label(name)} [{shown_unit}]", fontsize="small")

    # one legend: the marks mean the same in every panel
    axes[0].legend(loc="best", ncols=2, fontsize="x-small")
    axes[0].set_title(title or "Results by window")

    # which instruments were suspect in which window
    for row, tag in enumerate(shown):
        hit = np.array([tag in [s.strip() for s in str(v).split(",")]
                        for v in suspect_texts(table)])  # fmt: skip
        axs.plot(x[hit], np.full(hit.sum(), row), "s", color=_BAD, markersize=3)
    axs.set_yticks(range(len(shown)), shown)
    axs.set_ylim(-0.7, max(len(shown), 1) - 0.3)
    axs.invert_yaxis()
    more = f" ({len(tags) - len(shown)} more not shown)" if len(tags) > len(shown) else ""
    axs.set_ylabel("suspect tag")
    axs.set_title(("Suspect instruments" if shown else "No suspect instrument") + more,
                  loc="left")  # fmt: skip
    axs.set_xlabel(f"window mid-time [{zone}]")
    return fig
