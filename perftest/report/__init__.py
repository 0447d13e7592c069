"""Reports of an evaluated test run: tables, summary.json, Markdown, HTML, figures.

Typical use::

    from perftest import report
    data = report.collect(plant, run, window_run, measurements, rec, performance)
    report.write_reports(data, "out/")        # summary.json, report.md, report.html, figures/

Every writer takes a :class:`ReportData` (plain DataFrames and dicts), so reports
can also be made from tables built by hand.
"""

from __future__ import annotations

from pathlib import Path

from perftest.report.data import CAUTION, ReportData, collect
from perftest.report.html import render_html, write_html
from perftest.report.markdown import render_markdown, write_markdown
from perftest.report.summary import dumps, summary_json, write_summary
from perftest.report.tables import (
    budget_table,
    exergy_table,
    guarantees_table,
    measurements_table,
    reconciliation_table,
    results_table,
    stability_table,
)

__all__ = [
    "CAUTION",
    "ReportData",
    "collect",
    "summary_json",
    "write_summary",
    "dumps",
    "render_markdown",
    "write_markdown",
    "render_html",
    "write_html",
    "measurements_table",
    "stability_table",
    "reconciliation_table",
    "results_table",
    "budget_table",
    "guarantees_table",
    "exergy_table",
    "write_reports",
]


def write_reports(
    data: ReportData,
    out_dir=None,
    *,
    json_path=None,
    markdown_path=None,
    html_path=None,
    figures: bool = True,
) -> dict:
    """Write the summary, the reports and the figures.

    Parameters
    ----------
    data : ReportData
    out_dir : path, optional
        Directory for ``summary.json``, ``report.md``, ``report.html`` and
        ``figures/*.png``; any explicit path below overrides its file.
    json_path, markdown_path, html_path : path, optional
        Where to write each file; ``None`` (and no ``out_dir``) skips it.
    figures : bool
        Draw the figures (PNG files beside the Markdown report, embedded in HTML).

    Returns
    -------
    dict
        ``{"summary", "markdown", "html", "figures"}`` -> written paths.
    """
    if out_dir is not None:
        out_dir = Path(out_dir)
        json_path = json_path or out_dir / "summary.json"
        markdown_path = markdown_path or out_dir / "report.md"
        html_path = html_path or out_dir / "report.html"
    written: dict = {"figures": {}}
    pngs: dict = {}
    if figures and (markdown_path or html_path):
        import matplotlib.pyplot as plt

        from perftest.report.campaign import campaign_figures
        from perftest.report.figures import all_figures, figure_png

        figs = all_figures(data)
        figs.update(campaign_figures(data))
        pngs = {stem: figure_png(fig) for stem, fig in figs.items()}
        if markdown_path:
            fig_dir = Path(markdown_path).parent / "figures"
            from perftest.report.output import write_atomic

            for stem, png in pngs.items():
                write_atomic(fig_dir / f"{stem}.png", png)
                written["figures"][stem] = fig_dir / f"{stem}.png"
        for fig in figs.values():
            plt.close(fig)
    if json_path:
        written["summary"] = write_summary(data, json_path)
    if markdown_path:
        written["markdown"] = write_markdown(data, markdown_path, figures=pngs.keys())
    if html_path:
        written["html"] = write_html(data, html_path, figures=pngs)
    return written
