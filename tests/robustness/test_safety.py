"""Safety of inputs: nothing from a file is executed, HTML escapes input text,
spreadsheet cells cannot run formulas, and file names never come from data.

The HTML rule is the escaping of ``<``, ``>``, ``&`` and quotes in text content and
attribute values (HTML Living Standard, 13.1.2 and 13.2.5; Python's html.escape is
the reference used).  The spreadsheet rule, a leading single quote before a cell
that starts with ``=``, ``+``, ``-`` or ``@``, is common practice, no source.
"""

from __future__ import annotations

import ast
import html
import io
import json
import warnings
from pathlib import Path

import pandas as pd
import pytest

import perftest
from perftest import report
from perftest.report.tables import spreadsheet_safe, write_csv

PACKAGE = Path(perftest.__file__).resolve().parent

# calls that run code or rebuild arbitrary objects from bytes
_FORBIDDEN_NAMES = {"eval", "exec", "compile", "__import__", "execfile", "input"}
_FORBIDDEN_ATTRS = {
    ("pickle", "load"),
    ("pickle", "loads"),
    ("pickle", "Unpickler"),
    ("marshal", "load"),
    ("marshal", "loads"),
    ("shelve", "open"),
    ("yaml", "load"),
    ("yaml", "unsafe_load"),
    ("os", "system"),
    ("os", "popen"),
    ("pd", "read_pickle"),
    ("pandas", "read_pickle"),
    ("dill", "load"),
    ("dill", "loads"),
    ("joblib", "load"),
}


def _calls(tree: ast.AST):
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            f = node.func
            if isinstance(f, ast.Name):
                yield f.id, node
            elif isinstance(f, ast.Attribute) and isinstance(f.value, ast.Name):
                yield (f.value.id, f.attr), node
            elif isinstance(f, ast.Attribute):
                yield ("?", f.attr), node


def test_package_source_runs_no_code_from_inputs():
    found = []
    files = sorted(PACKAGE.rglob("*.py"))
    assert len(files) > 20  # the walk found the package
    for path in files:
        tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
        for what, node in _calls(tree):
            where = f"{path.relative_to(PACKAGE.parent)}:{node.lineno}"
            if isinstance(what, str) and what in _FORBIDDEN_NAMES:
                found.append(f"{where} {what}()")
            elif isinstance(what, tuple) and what in _FORBIDDEN_ATTRS:
                found.append(f"{where} {'.'.join(what)}()")
            elif what in {("np", "load"), ("numpy", "load")}:
                # np.load is safe only without allow_pickle=True
                for kw in node.keywords:
                    if kw.arg == "allow_pickle" and getattr(kw.value, "value", False):
                        found.append(f"{where} np.load(allow_pickle=True)")
            elif isinstance(what, tuple) and what[1] in {"Popen", "run", "call", "check_output"}:
                if what[0] == "subprocess":
                    found.append(f"{where} subprocess.{what[1]}()")
        for node in ast.walk(tree):
            if isinstance(node, ast.Import | ast.ImportFrom):
                names = [a.name for a in node.names]
                mod = getattr(node, "module", None) or ""
                for n in [mod, *names]:
                    if n.split(".")[0] in {"pickle", "marshal", "shelve", "dill", "cloudpickle"}:
                        found.append(f"{path.relative_to(PACKAGE.parent)}:{node.lineno} import {n}")
    assert found == []


def test_the_source_check_can_fail(tmp_path):
    # the walker above must see a forbidden call when one is there
    tree = ast.parse("import pickle\nx = eval(text)\ny = pickle.loads(b)\n")
    kinds = [w for w, _ in _calls(tree)]
    assert "eval" in kinds and ("pickle", "loads") in kinds


def _imports(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    imported = {a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names}
    imported |= {n.module for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) and n.module}
    return imported


def test_plant_file_is_parsed_as_data_only():
    # the plant file is parsed with tomllib (a data format: no expressions) in
    # perftest.plant.file; no module of perftest.plant imports another parser
    assert "tomllib" in _imports(PACKAGE / "plant" / "file.py")
    for path in sorted((PACKAGE / "plant").glob("*.py")):
        bad = _imports(path) & {"yaml", "json5", "pickle", "runpy", "importlib.machinery"}
        assert not bad, f"{path.name} imports {bad}"


# --- HTML escaping ------------------------------------------------------------------------

EVIL_TAG = "<script>alert(1)</script>"
EVIL_TEXT = 'Tom & Jerry "quoted" <b>bold</b>'


@pytest.fixture(scope="module")
def evil_report(tmp_path_factory):
    """A run whose column names, units and notes carry markup, through the real path."""
    folder = tmp_path_factory.mktemp("evil")
    csv = folder / "run.csv"
    csv.write_text(
        f"time,{EVIL_TAG},A&B\n"
        ",degC,bar\n"
        "2031-05-04 10:00:00,20.0,1.0\n"
        "2031-05-04 10:01:00,20.1,1.1\n"
        "2031-05-04 10:02:00,n/a <img src=x onerror=alert(2)>,1.2\n"
        "2031-05-04 10:03:00,20.2,1.1\n",
        encoding="utf-8",
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run(csv)
        m = run.average()
    data = report.collect(None, run, run, m, how=EVIL_TEXT, notes=[EVIL_TEXT, EVIL_TAG])
    return data, folder


def test_html_report_escapes_text_from_inputs(evil_report):
    data, _ = evil_report
    page = report.render_html(data)
    assert "<script>" not in page and "</script>" not in page
    assert "<img" not in page and "<b>" not in page
    assert html.escape(EVIL_TAG) in page  # shown, as text
    assert "A&amp;B" in page
    assert html.escape(EVIL_TEXT) in page
    # every '&' in the page begins an entity: no raw ampersand from the inputs
    import re

    assert not re.search(r"&(?![a-zA-Z]+;|#\d+;|#x[0-9a-fA-F]+;)", page)


def test_markdown_report_escapes_text_from_inputs(evil_report):
    # Markdown renderers (CommonMark, section 4.6 "HTML blocks") pass raw HTML
    # through, so text from inputs must reach the Markdown file as entities.
    data, _ = evil_report
    page = report.render_markdown(data)
    assert "<script>" not in page and "<img" not in page and "<b>" not in page
    assert "&lt;script>alert(1)&lt;/script>" in page  # shown, as text
    assert "A&B" in page  # a bare ampersand is no entity: left readable
    # a character reference from the inputs is shown as written, not decoded
    assert report.markdown._text("x &amp; y &#60;") == "x &amp;amp; y &amp;#60;"


def test_summary_json_keeps_input_text_as_data(evil_report):
    data, _ = evil_report
    text = report.dumps(report.summary_json(data))
    back = json.loads(text)
    tags = [m["tag"] for m in back["measurements"]]
    assert EVIL_TAG in tags  # verbatim (JSON strings are data, not markup)


def test_output_file_names_do_not_come_from_data(evil_report, tmp_path):
    data, _ = evil_report
    # a title that looks like a path must not steer where files go
    from dataclasses import replace

    data = replace(data, title="../../escaped/<x>")
    out = tmp_path / "out"
    written = report.write_reports(data, out, figures=True)
    files = sorted(p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file())
    from perftest.report.figures import FIGURES

    allowed = {"summary.json", "report.md", "report.html"} | {
        f"figures/{stem}.png" for stem in FIGURES
    }
    assert set(files) <= allowed
    assert {"summary.json", "report.md", "report.html"} <= set(files)
    assert not (tmp_path / "escaped").exists()
    for p in written["figures"].values():
        assert p.parent == out / "figures"


# --- spreadsheet cells ----------------------------------------------------------------------

CELLS = [
    ('=HYPERLINK("http://x")', '\'=HYPERLINK("http://x")'),
    ("+1+2", "'+1+2"),
    ("-2+3", "'-2+3"),
    ("@SUM(A1)", "'@SUM(A1)"),
    ("\t=1", "'\t=1"),
    ("-1.5", "-1.5"),  # a plain number stays a number
    ("+3", "+3"),
    ("TT-101", "TT-101"),
    ("", ""),
    (12.5, 12.5),
    (-3.0, -3.0),
]


@pytest.mark.parametrize("value, expected", CELLS)
def test_spreadsheet_safe(value, expected):
    assert spreadsheet_safe(value) == expected


def test_csv_tables_are_neutralised(tmp_path):
    df = pd.DataFrame(
        {"tag": ["=cmd|' /C calc'!A0", "TT-1", "@x"], "value": [-1.0, 2.0, 3.0]},
        index=pd.Index(["+a", "b", "c"], name="key"),
    )
    path = write_csv(df, tmp_path / "t.csv")
    back = pd.read_csv(path, index_col=0, dtype=str, keep_default_na=False)
    assert list(back["tag"]) == ["'=cmd|' /C calc'!A0", "TT-1", "'@x"]
    assert list(back.index) == ["'+a", "b", "c"]
    assert list(back["value"]) == ["-1.0", "2.0", "3.0"]  # numbers untouched
    raw = io.StringIO(path.read_text(encoding="utf-8")).read()
    assert "\n=" not in raw and ",=" not in raw and ",@" not in raw
