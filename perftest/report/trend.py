"""Results over time: the trend figure of a :func:`perftest.reconcile_many` table.

Three panels on one time axis:

1. first-law efficiency of each window with its expanded uncertainty band
   (:math:`\\pm 2u`, about 95 % coverage for a normal distribution), windows whose
   global test failed marked, windows that are unstable, failed or skipped shaded;
2. the Carnot bound of each window (same time axis, its own scale);
3. a strip of the instruments flagged suspect (or dropped by serial elimination)
   in each window: one row per tag, a mark where the tag was suspect.

Same look as :mod:`perftest.report.figures` (Agg canvas, no pyplot state).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from perftest.report.figures import _BAD, _GREY, _OK, _figure

__all__ = ["trend_figure", "COVERAGE_FACTOR"]

#: Coverage factor of the U95 band: 1.96, the 95 % quantile of the normal
#: distribution, as in every other U95 of the reports (windows of many samples: the
#: Student t factor is within 0.12 % of the normal one past 1000 degrees of freedom).
COVERAGE_FACTOR = 1.959963984540054

_MAX_TAG_ROWS = 12


def _suspect_tags(table: pd.DataFrame) -> list[str]:
    counts: dict = {}
    for text in table["suspects"].fillna(""):
        for tag in [t.strip() for t in str(text).split(",") if t.strip()]:
            counts[tag] = counts.get(tag, 0) + 1
    return sorted(counts, key=lambda t: (-counts[t], t))


def trend_figure(table: pd.DataFrame, *, title: str | None = None, tz: str | None = None):
    """Efficiency, Carnot bound and suspect instruments of each window over time.

    Parameters
    ----------
    table : pandas.DataFrame
        A :func:`perftest.reconcile_many` table with results (``first_law_efficiency``,
        ``u_first_law_efficiency``, ``carnot_efficiency``; fractions).
    title : str, optional
    tz : str, optional
        Time zone of the time axis (default: that of ``start``).

    Returns
    -------
    matplotlib.figure.Figure
        Axes 0: efficiency [%] (line, band, global-test failures); axes 1: Carnot
        bound [%]; axes 2: suspect-instrument strip.

    Raises
    ------
    InputError
        The table lacks the columns named above.
    """
    from perftest.errors import InputError

    need = ["start", "end", "status", "passed", "suspects", "first_law_efficiency",
            "u_first_law_efficiency", "carnot_efficiency"]  # fmt: skip
    missing = [c for c in need if c not in table.columns]
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
    eta = 100.0 * table["first_law_efficiency"].to_numpy(dtype=float)
    U = 100.0 * COVERAGE_FACTOR * table["u_first_law_efficiency"].to_numpy(dtype=float)
    carnot = 100.0 * table["carnot_efficiency"].to_numpy(dtype=float)
    status = table["status"].astype(str).to_numpy()
    passed = table["passed"].astype("boolean").to_numpy(dtype=bool, na_value=True)
    ok = status == "ok"
    tags = _suspect_tags(table)
    shown = tags[:_MAX_TAG_ROWS]
    heights = [3.0, 1.6, max(1.0, 0.28 * len(shown) + 0.5)]
    fig, axes = _figure(
        3, 1, size=(10.0, 3.0 + sum(heights)), sharex=True, gridspec_kw={"height_ratios": heights}
    )
    ax, axc, axs = axes
    zone = str(t.tz) if len(t) else "UTC"

    # 1. efficiency with its band; only windows with results are drawn
    has = np.isfinite(eta)
    ax.fill_between(x, eta - U, eta + U, where=has, color=_OK, alpha=0.2, linewidth=0,
                    label="U95 band (1.96·u)")  # fmt: skip
    ax.plot(x[has & ok], eta[has & ok], ".", color=_OK, markersize=4,
            label="first-law efficiency (net)")  # fmt: skip
    other = has & ~ok
    if other.any():
        ax.plot(x[other], eta[other], ".", color=_GREY, markersize=4,
                label="unstable window (kept, not steady)")  # fmt: skip
    fail = has & ~passed
    if fail.any():
        ax.plot(x[fail], eta[fail], "x", color=_BAD, markersize=5, label="global test failed")
    dead = ~has
    for xi in x[dead]:
        ax.axvline(xi, color=_GREY, alpha=0.25, linewidth=0.8)
    if dead.any():
        ax.plot([], [], "|", color=_GREY, label="no result (skipped or failed)")
    ax.set_ylabel("efficiency η [%]")
    ax.legend(loc="best", ncols=2)
    ax.set_title(title or "Results by window")

    # 2. the Carnot bound
    axc.plot(x[np.isfinite(carnot)], carnot[np.isfinite(carnot)], "-", color=_BAD,
             linewidth=1.0, label="Carnot bound 1 − T_sink/T_source")  # fmt: skip
    axc.set_ylabel("Carnot bound [%]")
    axc.legend(loc="best")

    # 3. which instruments were suspect in which window
    for row, tag in enumerate(shown):
        hit = np.array([tag in [s.strip() for s in str(v).split(",")]
                        for v in table["suspects"].fillna("")])  # fmt: skip
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
