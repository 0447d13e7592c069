"""Markdown report (GitHub-flavoured tables; figures referenced as PNG files)."""

from __future__ import annotations

import re
from pathlib import Path

import pandas as pd

from perftest.display import numeric_columns
from perftest.report.campaign import report_sections as sections
from perftest.report.data import ReportData

__all__ = ["render_markdown", "write_markdown", "markdown_table"]


# What a Markdown renderer would take as raw HTML or a character reference
# (CommonMark 0.31, sections 6.6 "Raw HTML" and 2.5 "Entity and numeric character
# references"): "<" before a letter, "/", "!" or "?", and "&" before a name or number
# and ";".  Only those are escaped, so "<= 3" or "A & B" stay readable in the file.
_HTML_START = re.compile(r"<(?=[A-Za-z/!?])")
_ENTITY = re.compile(r"&(?=#?[A-Za-z0-9]+;)")


def _text(text) -> str:
    """Text taken from inputs made inert: Markdown renderers pass raw HTML through,
    so a tag named ``<script>`` must reach the file as ``&lt;script>``."""
    return _HTML_START.sub("&lt;", _ENTITY.sub("&amp;", str(text)))


def _cell(text: str) -> str:
    return _text(text).replace("|", "\\|").replace("\n", " ")


def markdown_table(df: pd.DataFrame, flags=None) -> str:
    """A DataFrame of strings as a Markdown table; flagged rows are set in bold."""
    flags = list(flags or [False] * len(df))
    cols = [str(c) for c in df.columns]
    # text left-aligned, columns of numbers right-aligned (GFM alignment row)
    numeric = numeric_columns([list(r) for r in df.itertuples(index=False)], len(cols))
    lines = [
        "| " + " | ".join(_cell(c) for c in cols) + " |",
        "|" + "|".join("---:" if num else ":---" for num in numeric) + "|",
    ]
    for flag, row in zip(flags, df.itertuples(index=False), strict=True):
        cells = [_cell(v) for v in row]
        if flag:
            cells = [f"**{c}**" if c else c for c in cells]
        lines.append("| " + " | ".join(cells) + " |")
    return "\n".join(lines)


def render_markdown(data: ReportData, *, figures=(), figure_dir: str = "figures") -> str:
    """The report as Markdown text.

    Parameters
    ----------
    data : ReportData
    figures : collection of str
        Stems of the figures written to ``figure_dir`` (relative to the report).
    figure_dir : str
        Relative path of the figure files.
    """
    out: list = []
    for blk in sections(data, figures=figures):
        if blk.kind == "h1":
            out.append(f"# {_text(blk.text)}")
        elif blk.kind == "h2":
            out.append(f"## {_text(blk.text)}")
        elif blk.kind == "p":
            out.append(_text(blk.text))
        elif blk.kind == "caution":
            out.append(f"> **Caution.** {_text(blk.text)}")
        elif blk.kind == "warning":
            out.append(f"> **Attention:** {_text(blk.text)}")
        elif blk.kind == "list":
            out.append("\n".join(f"- {_cell(i)}" for i in blk.items))
        elif blk.kind == "table":
            out.append(markdown_table(blk.table, blk.flags))
        elif blk.kind == "figure":
            cap = _text(blk.text)
            out.append(f"![{cap}]({figure_dir}/{blk.figure}.png)\n\n*{cap}*")
    return "\n\n".join(out) + "\n"


def write_markdown(data: ReportData, path, *, figures=(), figure_dir="figures") -> Path:
    """Write :func:`render_markdown` to ``path``."""
    from perftest.report.output import write_atomic

    return write_atomic(path, render_markdown(data, figures=figures, figure_dir=figure_dir))
