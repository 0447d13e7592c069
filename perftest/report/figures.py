"""Report figures (matplotlib, Agg canvas).

Each function takes a :class:`~perftest.report.data.ReportData` and returns a
``matplotlib.figure.Figure`` (or ``None`` when the data it needs are missing).
All figures share one look: white background, readable fonts, labelled axes with
units, a title, a legend where there is more than one series, and a layout that
keeps text from overlapping (``constrained_layout``).

The figures are plain ``Figure`` objects on an Agg canvas, not pyplot figures: no
GUI backend is touched, nothing is registered globally and nothing needs closing.
:func:`figure_png` draws a figure once (the constrained layout runs inside that
draw) and encodes the canvas as PNG; the same bytes serve the ``figures/`` folder
and the HTML report.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pandas as pd

from perftest.display import COLOURS, fmt_uncertain, unit_label
from perftest.report.data import ReportData
from perftest.report.tables import result_display, to_display

__all__ = [
    "stability_figure",
    "stability_pages",
    "STABILITY_TAGS_PER_PAGE",
    "reconciliation_figure",
    "budget_figure",
    "efficiency_figure",
    "exergy_figure",
    "all_figures",
    "save_figures",
    "figure_png",
    "PNG_DPI",
]

#: Resolution of the PNG files [dots per inch].  At 120 dpi the 8 to 10 inch wide
#: figures are 960-1200 px wide: sharp on a screen and in a printed A4 page, at a
#: third of the pixels (and drawing time) of 200 dpi.
PNG_DPI = 120

# zlib level of the PNG encoder: level 6 (the usual default) takes about twice the
# time of level 3 for files a few per cent smaller on these flat-coloured plots.
_PNG_COMPRESS_LEVEL = 3

_STYLE = {
    "font.size": 10,
    "axes.titlesize": 11,
    "axes.labelsize": 10,
    "legend.fontsize": 9,
    "xtick.labelsize": 9,
    "ytick.labelsize": 9,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "axes.grid": True,
    "grid.alpha": 0.3,
    "figure.dpi": 100,
}
# One colour per thing, shared with the HTML report and the notebook tables.
_OK = COLOURS["reconciled"]
_BAD = COLOURS["suspect"]
_GREY = COLOURS["measured"]
_WINDOW = COLOURS["window"]
_U95 = COLOURS["uncertainty"]

#: Tags per page of the stability figure.
STABILITY_TAGS_PER_PAGE = 10


def _figure(nrows=1, ncols=1, *, size=(8.0, 4.5), **kw):
    """A constrained-layout Figure on an Agg canvas with ``nrows x ncols`` axes."""
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    with matplotlib.rc_context(_STYLE):
        fig = Figure(figsize=size, layout="constrained", facecolor="white")
        FigureCanvasAgg(fig)
        axes = fig.subplots(nrows, ncols, squeeze=True, **kw)
    return fig, axes


def _apply_style(fig) -> None:
    for ax in fig.axes:
        ax.title.set_fontsize(_STYLE["axes.titlesize"])
        ax.xaxis.label.set_fontsize(_STYLE["axes.labelsize"])
        ax.yaxis.label.set_fontsize(_STYLE["axes.labelsize"])
        ax.tick_params(labelsize=_STYLE["xtick.labelsize"])
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        ax.grid(True, alpha=0.3)
        ax.set_axisbelow(True)


# --------------------------------------------------------------------------- 1 trends


def stability_pages(data: ReportData) -> list:
    """The trended tags split into pages of :data:`STABILITY_TAGS_PER_PAGE`."""
    tags = list(data.trends.columns)
    n = STABILITY_TAGS_PER_PAGE
    return [tags[i : i + n] for i in range(0, len(tags), n)]


def stability_figure(data: ReportData, tags=None, *, page: int = 1, pages: int = 1):
    """Trends over the whole run, the chosen window shaded, the permissible band drawn.

    Parameters
    ----------
    data : ReportData
    tags : sequence of str, optional
        Tags to draw (default: the first page of :func:`stability_pages`).
    page, pages : int
        Page number and page count, for the title.

    Notes
    -----
    The band is the window mean ± the tag's permissible variation, drawn over the
    window: a tag is steady when its trace and its drift stay inside (the ratio
    of the stability table is at most one).
    """
    t = data.trends
    if t.empty:
        return None
    if tags is None:
        tags = stability_pages(data)[0]
    tags = [c for c in tags if c in t.columns]
    if not tags:
        return None
    fig, axes = _figure(len(tags), 1, size=(8.5, 1.45 * len(tags) + 1.1), sharex=True)
    axes = np.atleast_1d(axes)
    start = pd.Timestamp(data.window["start"]) if data.window.get("start") else None
    end = pd.Timestamp(data.window["end"]) if data.window.get("end") else None
    idx = t.index
    st = data.stability
    for ax, tag in zip(axes, tags, strict=True):
        q = data.quantities.get(tag)
        rho = data.densities.get(tag)
        values, unit = to_display(
            t[tag].to_numpy(float),
            data.units.get(tag),
            atmospheric_pressure=data.atmospheric_pressure,
            quantity=q,
            density=rho,
        )
        ax.plot(idx, values, color=_OK, lw=1.0, label="logged value")
        if start is not None and end is not None:
            ax.axvspan(start, end, color=_WINDOW, alpha=0.35, lw=0, label="averaged window")
            if not st.empty and tag in st.index and "permissible" in st.columns:
                mean_si = float(st.loc[tag, "mean"])
                perm_si = float(st.loc[tag, "permissible"])
                if math.isfinite(mean_si) and math.isfinite(perm_si) and perm_si > 0:
                    mean, _ = to_display(
                        mean_si,
                        unit,
                        atmospheric_pressure=data.atmospheric_pressure,
                        quantity=q,
                        density=rho,
                    )
                    perm, _ = to_display(perm_si, unit, quantity=q, difference=True, density=rho)
                    lo, hi = float(mean) - float(perm), float(mean) + float(perm)
                    ax.fill_between(
                        [start, end],
                        lo,
                        hi,
                        color=COLOURS["band"],
                        alpha=0.8,
                        lw=0,
                        label="permissible variation",
                        zorder=0.5,
                    )
                    for edge in (lo, hi):
                        ax.hlines(edge, start, end, color=COLOURS["band_edge"], lw=0.9, ls="--")
                    failed = st.loc[tag].get("passed") is False or (
                        float(st.loc[tag].get("ratio", 0.0)) > 1.0
                    )
                    if failed:
                        ax.set_facecolor(COLOURS["flag_background"])
        label = unit_label(unit)
        ax.set_ylabel(f"{tag}\n[{label}]" if label else tag, fontsize=9)
        ax.margins(x=0)
    handles, labels = axes[0].get_legend_handles_labels()
    for ax in axes[1:]:
        for h, lab in zip(*ax.get_legend_handles_labels(), strict=True):
            if lab not in labels:
                handles.append(h)
                labels.append(lab)
    fig.legend(handles, labels, loc="outside lower center", ncols=3, frameon=False)
    axes[-1].set_xlabel("time" + (f" [{idx.tz}]" if getattr(idx, "tz", None) else ""))
    if isinstance(idx, pd.DatetimeIndex):
        import matplotlib.dates as mdates

        loc = mdates.AutoDateLocator(tz=idx.tz)
        axes[-1].xaxis.set_major_locator(loc)
        axes[-1].xaxis.set_major_formatter(mdates.ConciseDateFormatter(loc, tz=idx.tz))
    title = f"{data.title}: trends, averaged window and permissible variation"
    if pages > 1:
        title += f" ({page} of {pages})"
    fig.suptitle(title)
    _apply_style(fig)
    return fig


# --------------------------------------------------------------------------- 2 reconciliation


def reconciliation_figure(data: ReportData):
    """Adjustments of the measurements and their measurement-test statistics."""
    r = data.reconciliation
    if r.empty:
        return None
    r = (
        r[r.get("in_balance", pd.Series(True, index=r.index)).astype(bool)]
        if ("in_balance" in r.columns)
        else r
    )
    if r.empty:
        return None
    tags = list(r["tag"])
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = (r["reconciled"] - r["measured"]) / np.abs(r["measured"]) * 100.0
        urel = r["u_measured"] / np.abs(r["measured"]) * 100.0 * 1.96
        urel_rec = r["u_reconciled"] / np.abs(r["measured"]) * 100.0 * 1.96
    z = np.abs(r["z"].to_numpy(float))
    # A dropped instrument has no z in the final reconciliation: show the z that
    # dropped it (serial elimination), hatched.
    z_elim = {e["tag"]: abs(float(e["z"])) for e in data.eliminated}
    dropped = np.array([t in z_elim for t in tags])
    z = np.array([z_elim.get(t, zi) for t, zi in zip(tags, z, strict=True)])
    suspect = r["suspect"].to_numpy(bool)
    colors = [_BAD if s else _OK for s in suspect]
    y = np.arange(len(tags))
    fig, (a1, a2) = _figure(1, 2, size=(10.0, 0.32 * len(tags) + 2.2), sharey=True)
    # U95 of the measurement as a pale box around zero (an adjustment inside it is
    # within the instrument's uncertainty), U95 of the reconciled value as a capped
    # bar at the end of the adjustment.
    a1.barh(
        y,
        2 * np.asarray(urel, dtype=float),
        left=-np.asarray(urel, dtype=float),
        color=_U95,
        alpha=0.35,
        height=0.8,
        lw=0,
        label="U95 without reconciliation",
    )
    a1.barh(y, rel, color=colors, height=0.45, label="adjustment (red: suspect)")
    a1.errorbar(
        np.asarray(rel, dtype=float),
        y,
        xerr=np.asarray(urel_rec, dtype=float),
        fmt="none",
        ecolor="black",
        capsize=3,
        lw=1.1,
        label="U95 with reconciliation",
    )
    a1.axvline(0, color="black", lw=0.8)
    a1.set_yticks(y, tags)
    a1.invert_yaxis()
    a1.set_xlabel("reconciled − measured [% of measured]")
    a1.set_title("Adjustments")
    z_plot = np.where(np.isfinite(z), z, 0.0)
    a2.barh(y[~dropped], z_plot[~dropped], color=np.array(colors)[~dropped], height=0.6)
    if dropped.any():
        a2.barh(
            y[dropped],
            z_plot[dropped],
            color="white",
            edgecolor=_BAD,
            hatch="///",
            height=0.6,
            label="dropped (|z| when dropped)",
        )
    for yi, zi in zip(y, z, strict=True):
        if not np.isfinite(zi):
            a2.text(0.05, yi, "not redundant", va="center", fontsize=8, color=_GREY)
    a2.axvline(
        data.critical_z,
        color=_BAD,
        ls="--",
        lw=1.2,
        label=f"critical value {data.critical_z:.2f} (alpha = {data.alpha:g})",
    )
    top = np.nanmax(np.append(z_plot, data.critical_z))
    a2.set_xlim(0, top * 1.12)
    a2.set_xlabel("|z| measurement test [-]")
    a2.set_title("Normalised adjustments")
    handles, labels = [], []
    for ax in (a1, a2):
        h, lab = ax.get_legend_handles_labels()
        handles += h
        labels += lab
    fig.legend(handles, labels, loc="outside lower center", ncols=3, frameon=False)
    gt = data.global_test or {}
    sub = ""
    if gt.get("chi2") is not None:
        sub = (
            f" (global test: χ² = {gt['chi2']:.2f}, {gt['dof']} degrees of freedom, "
            f"p = {gt['p_value']:.3f})"
        )
    fig.suptitle(f"Measured vs reconciled; suspects in red{sub}")
    _apply_style(fig)
    return fig


# --------------------------------------------------------------------------- 3 budget


def budget_figure(data: ReportData, name: str | None = None, top: int = 8):
    """Uncertainty budget of one result: share of the variance per input.

    ``name`` defaults to the first headline result with a budget (first-law
    efficiency, heat rate, COP, fuel utilisation, then any guaranteed result).
    """
    if name is None:
        from perftest.report.tables import budget_results

        names = budget_results(data)
        if not names:
            return None
        name = names[0]
    b = data.budgets.get(name)
    if b is None or b.empty:
        return None
    share = (b["share"] * 100.0).sort_values(key=np.abs, ascending=False).head(top)[::-1]
    fig, ax = _figure(size=(8.0, 0.4 * len(share) + 1.6))
    colors = [_OK if v >= 0 else _GREY for v in share.to_numpy()]
    ax.barh(np.arange(len(share)), share.to_numpy(), color=colors, height=0.6)
    ax.set_yticks(np.arange(len(share)), [str(i) for i in share.index])
    for i, v in enumerate(share.to_numpy()):
        ax.text(v, i, f" {v:.1f} %", va="center", fontsize=8)
    ax.set_xlabel("share of the variance [%]")
    ax.set_xlim(min(0.0, float(share.min()) * 1.1), max(5.0, float(share.max()) * 1.18))
    title = name.replace("_", " ")
    if name in data.results.index:
        r = data.results.loc[name]
        if isinstance(r.get("description"), str) and r["description"]:
            title = r["description"][0].lower() + r["description"][1:]
        unit, scale, offset = result_display(name, r["unit"], r["value"])
        v, U = fmt_uncertain(r["value"] * scale + offset, r["U95"] * abs(scale))
        label = "" if unit == "1" else " " + unit_label(unit)
        title += f": {v} ± {U}{label} (U95)"
    ax.set_title(f"Uncertainty budget of the {title}")
    _apply_style(fig)
    return fig


# --------------------------------------------------------------------------- 4 efficiency


def efficiency_figure(data: ReportData):
    """First-law efficiency against the Curzon-Ahlborn and Carnot bounds."""
    res = data.results
    names = [
        ("first_law_efficiency", "first-law\n(net, measured)"),
        ("curzon_ahlborn_efficiency", "Curzon-Ahlborn\n(at maximum power)"),
        ("carnot_efficiency", "Carnot\n(reversible bound)"),
    ]
    if not all(n in res.index for n, _ in names):
        return None
    # The second-law efficiency compares the cycle (gross power / heat absorbed) with
    # Carnot; the bound at the mean temperatures of heat addition and rejection shows
    # how much of the gap the temperature spread of heat transfer explains.
    extra = [
        (1, "cycle_efficiency", "cycle\n(gross / heat absorbed)", "#1f618d"),
        (3, "mean_temperature_carnot_efficiency", "Carnot at mean\ntemperatures", "#5d6d7e"),
    ]
    colors = [_OK, _GREY, COLOURS["bound"]]
    for at, n, label, color in extra:
        if n in res.index:
            names.insert(at, (n, label))
            colors.insert(at, color)
    vals = np.array([res.loc[n, "value"] for n, _ in names]) * 100.0
    errs = np.array([res.loc[n, "U95"] for n, _ in names]) * 100.0
    fig, ax = _figure(size=(7.5 + 1.2 * (len(names) - 3), 4.5))
    x = np.arange(len(names))
    ax.bar(
        x,
        vals,
        color=colors,
        width=0.55,
        yerr=errs,
        capsize=8,
        error_kw={"lw": 1.6, "ecolor": "black"},
        label="value with U95",
    )
    for xi, v, e in zip(x, vals, errs, strict=True):
        ax.text(xi, v + e + 1.0, f"{v:.1f} %", ha="center", fontsize=9)
    ax.set_xticks(x, [lab for _, lab in names])
    ax.set_ylabel("efficiency [%]")
    ax.set_ylim(0, max(vals + errs) * 1.18)
    if "second_law_efficiency" in res.index:
        i_ref = (
            [n for n, _ in names].index("cycle_efficiency")
            if "cycle_efficiency" in res.index
            else 0
        )
        r = res.loc["second_law_efficiency"]
        ax.annotate(
            "second-law efficiency\n{} ± {} % (U95)".format(
                *fmt_uncertain(r["value"] * 100, r["U95"] * 100)
            ),
            xy=(i_ref, vals[i_ref] + errs[i_ref]),
            xytext=(i_ref + 0.5, vals[-1] * 0.9),
            fontsize=9,
            ha="center",
            arrowprops={"arrowstyle": "->", "color": _GREY},
        )
    ts = res.loc["source_temperature", "value"] if "source_temperature" in res.index else None
    tk = res.loc["sink_temperature", "value"] if "sink_temperature" in res.index else None
    sub = ""
    if ts is not None and tk is not None and math.isfinite(ts) and math.isfinite(tk):
        sub = f"\nbetween {ts - 273.15:.1f} °C (source) and {tk - 273.15:.1f} °C (sink)"
    ax.set_title("Efficiency and its thermodynamic bounds" + sub)
    ax.legend(loc="upper left", frameon=False)
    _apply_style(fig)
    return fig


# --------------------------------------------------------------------------- 5 flows


def exergy_figure(data: ReportData):
    """Where the fuel's energy and exergy go: two stacked bars and per-unit destruction."""
    res = data.results
    e = data.exergy
    need = ("heat_input", "net_power", "fuel_exergy")
    if e.empty or not all(n in res.index for n in need):
        return None
    mw = 1e-6
    q_in = res.loc["heat_input", "value"] * mw
    net = res.loc["net_power", "value"] * mw
    aux = res.loc["auxiliary_power", "value"] * mw if "auxiliary_power" in res.index else 0.0
    ex_in = res.loc["fuel_exergy", "value"] * mw
    # Energy: net, auxiliaries, heat rejected in the condenser, the rest (boiler
    # stack and other losses) by difference.
    q_cond = (
        sum(_condenser_heat(data, u) for u in e[e["type"].isin(["condenser", "cooler"])]["unit"])
        * mw
    )
    energy = [("net power", net, _OK), ("auxiliaries", aux, _U95)]
    if q_cond > 0:
        energy.append(("condenser heat", q_cond, "#aed6f1"))
    if "heat_export" in res.index:  # CHP: the exported heat is a product, not a loss
        energy.append(("heat export", res.loc["heat_export", "value"] * mw, "#f5b041"))
    energy.append(("boiler and other losses", max(q_in - sum(v for _, v, _ in energy), 0.0), _GREY))
    palette = ["#c0392b", "#e67e22", "#d35400", "#a93226", "#cd6155", "#f0b27a", "#922b21"]
    destroyed = [
        (f"destroyed: {u}", float(d) * mw, palette[i % len(palette)])
        for i, (u, d) in enumerate(zip(e["unit"], e["destroyed"], strict=True))
    ]
    exergy = [("net power", net, _OK)]
    if "heat_export_exergy" in res.index:
        exergy.append(("heat export", res.loc["heat_export_exergy", "value"] * mw, "#f5b041"))
    exergy += destroyed
    greys = ["#bdc3c7", "#d7dbdd", "#a6acaf", "#e5e8e8"]
    for i, (k, v) in enumerate(data.exergy_losses.items()):
        exergy.append((f"lost: {k}", float(v) * mw, greys[i % len(greys)]))

    fig, (a1, a2) = _figure(2, 1, size=(11.0, 7.0), height_ratios=[1.0, 1.3])
    for row, (_label, total, parts) in enumerate(
        [("energy\n(heat input)", q_in, energy), ("exergy\n(fuel exergy)", ex_in, exergy)]
    ):
        left = 0.0
        for name, v, color in parts:
            if v <= 0:
                continue
            a1.barh(row, v, left=left, color=color, edgecolor="white", height=0.55, label=name)
            if v / total > 0.06:
                a1.text(
                    left + v / 2,
                    row,
                    f"{v:.1f}",
                    ha="center",
                    va="center",
                    fontsize=8,
                    color="white",
                )
            left += v
        a1.text(total * 1.01, row, f"{total:.1f} MW", va="center", fontsize=9)
    a1.set_yticks([0, 1], ["energy\n(heat input)", "exergy\n(fuel exergy)"])
    a1.invert_yaxis()
    a1.set_xlim(0, max(q_in, ex_in) * 1.15)
    a1.set_xlabel("flow [MW]")
    a1.set_title("Where the fuel goes: energy and exergy")
    handles, labels = a1.get_legend_handles_labels()
    uniq = dict(zip(labels, handles, strict=True))
    # One readable column beside the bars, in the order the segments are stacked.
    a1.legend(
        uniq.values(),
        uniq.keys(),
        loc="upper left",
        bbox_to_anchor=(1.01, 1.0),
        ncols=1,
        frameon=False,
        fontsize=9,
        title="segments, left to right",
        title_fontsize=9,
        alignment="left",
    )

    order = e.sort_values("destroyed", ascending=True)
    y = np.arange(len(order))
    err = order["u_destroyed"].to_numpy(float) * mw * 1.96
    a2.barh(
        y,
        order["destroyed"].to_numpy(float) * mw,
        color=COLOURS["destroyed"],
        height=0.6,
        label="exergy destroyed",
    )
    has_u = np.isfinite(err)
    if has_u.any():
        a2.errorbar(
            order["destroyed"].to_numpy(float)[has_u] * mw,
            y[has_u],
            xerr=err[has_u],
            fmt="none",
            ecolor="black",
            capsize=5,
            lw=1.4,
            label="U95",
        )
    gs = order["gouy_stodola"].to_numpy(float) * mw
    ok = np.isfinite(gs)
    a2.plot(
        gs[ok],
        y[ok],
        "D",
        ms=6,
        mfc="white",
        mec="black",
        ls="none",
        label="T0 × entropy generation (Gouy-Stodola)",
    )
    a2.set_yticks(
        y,
        [u if u == t else f"{u} ({t})" for u, t in zip(order["unit"], order["type"], strict=True)],
    )
    a2.set_xlabel("exergy destroyed [MW]")
    a2.set_title("Exergy destroyed per piece of equipment (boiler includes stack loss)")
    a2.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=9)
    _apply_style(fig)
    return fig


def _condenser_heat(data: ReportData, uid: str) -> float:
    """Heat rejected by a condenser [W] (``heat`` column of the exergy table)."""
    if "heat" in data.exergy.columns:
        row = data.exergy[data.exergy["unit"] == uid]
        if not row.empty and math.isfinite(float(row["heat"].iloc[0])):
            return float(row["heat"].iloc[0])
    return 0.0


# --------------------------------------------------------------------------- output

#: file stem -> figure function
FIGURES = {
    "stability": stability_figure,
    "reconciliation": reconciliation_figure,
    "budget": budget_figure,
    "efficiency": efficiency_figure,
    "flows": exergy_figure,
}


def all_figures(data: ReportData) -> dict:
    """Every figure that the data allow: ``{stem: Figure}``.

    The stability figure is paged: ``stability``, ``stability_2``, ... with
    :data:`STABILITY_TAGS_PER_PAGE` tags each.
    """
    out = {}
    for stem, func in FIGURES.items():
        if stem == "stability":
            pages = stability_pages(data)
            for i, tags in enumerate(pages, 1):
                fig = stability_figure(data, tags, page=i, pages=len(pages))
                if fig is not None:
                    out["stability" if i == 1 else f"stability_{i}"] = fig
            continue
        fig = func(data)
        if fig is not None:
            out[stem] = fig
    return out


def figure_png(fig, dpi: int = PNG_DPI) -> bytes:
    """PNG bytes of a figure, drawn once at ``dpi`` on a white background.

    ``Figure.savefig`` draws a constrained-layout figure twice (a layout pass, then
    the picture); here the layout runs inside the single canvas draw and the canvas
    pixels are encoded directly, as opaque RGB.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    canvas = fig.canvas if isinstance(fig.canvas, FigureCanvasAgg) else FigureCanvasAgg(fig)
    old_dpi, old_face = fig.get_dpi(), fig.get_facecolor()
    fig.set_dpi(dpi)
    fig.set_facecolor("white")
    try:
        canvas.draw()
        rgb = np.asarray(canvas.buffer_rgba())[..., :3]
        buf = io.BytesIO()
        Image.fromarray(rgb).save(
            buf, format="png", compress_level=_PNG_COMPRESS_LEVEL, dpi=(dpi, dpi)
        )
    finally:
        fig.set_dpi(old_dpi)
        fig.set_facecolor(old_face)
    return buf.getvalue()


def save_figures(figures: dict, directory, dpi: int = PNG_DPI) -> dict:
    """Write each figure as ``<directory>/<stem>.png``; returns ``{stem: path}``."""
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    paths = {}
    for stem, fig in figures.items():
        from perftest.report.output import write_atomic

        path = write_atomic(directory / f"{stem}.png", figure_png(fig, dpi))
        paths[stem] = path
    return paths
