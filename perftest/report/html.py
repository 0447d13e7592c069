"""Self-contained HTML report: one file, styles inline, figures embedded as PNG.

The file links to nothing outside itself (no stylesheet, script or image URLs),
so it can be mailed, archived or opened offline and still show everything.
"""

from __future__ import annotations

import base64
import html
from pathlib import Path

import pandas as pd

from perftest.display import COLOURS, numeric_columns
from perftest.report.campaign import report_sections as sections
from perftest.report.data import ReportData

__all__ = ["render_html", "write_html", "html_table"]

_CSS = f"""
body {{ font-family: system-ui, -apple-system, "Segoe UI", Roboto, Arial, sans-serif;
       max-width: 1100px; margin: 2em auto; padding: 0 1em; color: #1c2833;
       line-height: 1.45; }}
h1 {{ font-size: 1.6em; border-bottom: 2px solid {COLOURS["reconciled"]}; padding-bottom: .3em; }}
h2 {{ font-size: 1.25em; margin-top: 1.8em; color: {COLOURS["reconciled"]}; }}
table {{ border-collapse: collapse; margin: .6em 0 1.2em; font-size: .85em; }}
th, td {{ border: 1px solid {COLOURS["grid"]}; padding: .25em .55em; text-align: left;
         vertical-align: top; }}
th {{ background: {COLOURS["heading"]}; font-weight: 600; }}
td.num {{ text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }}
td.id {{ white-space: nowrap; }}
tr.flag td {{ background: {COLOURS["flag_background"]}; font-weight: 600;
             color: {COLOURS["suspect"]}; }}
table.meta th {{ display: none; }}
table.meta td:first-child {{ font-weight: 600; background: #f8f9f9; white-space: nowrap; }}
.caution {{ background: #fef9e7; border-left: 5px solid #f1c40f; padding: .7em 1em; }}
.warning {{ background: #fdecea; border-left: 5px solid {COLOURS["suspect"]}; padding: .7em 1em; }}
figure {{ margin: 1em 0; }}
figure img {{ max-width: 100%; height: auto; border: 1px solid #eee; }}
figcaption {{ font-size: .85em; color: #566573; }}
.scroll {{ overflow-x: auto; }}
li {{ overflow-wrap: anywhere; }}
@page {{ size: A4; margin: 14mm 11mm 16mm 11mm; }}
@media print {{
  body {{ max-width: none; margin: 0; padding: 0; font-size: 9pt; line-height: 1.3; }}
  h1 {{ font-size: 15pt; }}
  h2 {{ font-size: 11.5pt; margin-top: 1.1em; break-after: avoid; page-break-after: avoid; }}
  .scroll {{ overflow: visible; }}
  table {{ font-size: 7.2pt; width: 100%; margin: .3em 0 .8em; }}
  th, td {{ padding: .12em .3em; }}
  th {{ -webkit-print-color-adjust: exact; print-color-adjust: exact; }}
  thead {{ display: table-header-group; }}
  tr {{ break-inside: avoid; page-break-inside: avoid; }}
  tr.flag td, .caution, .warning {{ -webkit-print-color-adjust: exact; print-color-adjust: exact; }}
  figure {{ break-inside: avoid; page-break-inside: avoid; }}
  figure img {{ max-height: 235mm; width: auto; max-width: 100%; }}
  ul {{ font-size: 8pt; }}
}}
"""


def _cell_class(col: int, numeric: list) -> str:
    if col == 0:
        return ' class="id"'
    return ' class="num"' if numeric[col] else ""


def html_table(df: pd.DataFrame, flags=None, *, css_class: str = "") -> str:
    """A DataFrame of strings as an HTML table; flagged rows get class ``flag``."""
    flags = list(flags or [False] * len(df))
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in df.columns)
    numeric = numeric_columns([list(r) for r in df.itertuples(index=False)], len(df.columns))
    rows = []
    for flag, row in zip(flags, df.itertuples(index=False), strict=True):
        cls = ' class="flag"' if flag else ""
        cells = "".join(
            f"<td{_cell_class(j, numeric)}>{html.escape(str(v))}</td>" for j, v in enumerate(row)
        )
        rows.append(f"<tr{cls}>{cells}</tr>")
    cls_attr = f' class="{html.escape(css_class)}"' if css_class else ""
    return (
        f'<div class="scroll"><table{cls_attr}><thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(rows)}</tbody></table></div>"
    )


def render_html(data: ReportData, *, figures: dict | None = None) -> str:
    """The report as one self-contained HTML page.

    Parameters
    ----------
    data : ReportData
    figures : dict, optional
        ``{stem: PNG bytes}`` embedded as base64 data URIs.
    """
    figures = figures or {}
    body: list = []
    for blk in sections(data, figures=figures.keys()):
        if blk.kind == "h1":
            body.append(f"<h1>{html.escape(blk.text)}</h1>")
        elif blk.kind == "h2":
            body.append(f"<h2>{html.escape(blk.text)}</h2>")
        elif blk.kind == "p":
            body.append(f"<p>{html.escape(blk.text)}</p>")
        elif blk.kind == "caution":
            body.append(f'<p class="caution"><strong>Caution.</strong> {html.escape(blk.text)}</p>')
        elif blk.kind == "warning":
            body.append(
                f'<p class="warning"><strong>Attention:</strong> {html.escape(blk.text)}</p>'
            )
        elif blk.kind == "list":
            items = "".join(f"<li>{html.escape(str(i))}</li>" for i in blk.items)
            body.append(f"<ul>{items}</ul>")
        elif blk.kind == "table":
            body.append(html_table(blk.table, blk.flags, css_class=blk.text))
        elif blk.kind == "figure":
            png = figures[blk.figure]
            b64 = base64.b64encode(png).decode("ascii")
            body.append(
                f'<figure><img alt="{html.escape(blk.text)}" '
                f'src="data:image/png;base64,{b64}"><figcaption>{html.escape(blk.text)}'
                "</figcaption></figure>"
            )
    title = html.escape(data.title + ": performance test report")
    return (
        '<!DOCTYPE html>\n<html lang="en">\n<head>\n<meta charset="utf-8">\n'
        f"<title>{title}</title>\n<style>{_CSS}</style>\n</head>\n<body>\n"
        + "\n".join(body)
        + "\n</body>\n</html>\n"
    )


def write_html(data: ReportData, path, *, figures: dict | None = None) -> Path:
    """Write :func:`render_html` to ``path``."""
    from perftest.report.output import write_atomic

    return write_atomic(path, render_html(data, figures=figures))
