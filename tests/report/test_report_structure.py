"""The report's structure (sections, table columns) and its way of writing numbers.

The snapshot below is the report's design: section headings in order and the
column headings of each table, in words with units.  It holds no number of the
demo's output; the numeric checks compare the report with the objects it was made
from.
"""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from perftest.report import ReportData, render_markdown
from perftest.report import tables as T

DATA = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"

# (section heading, [column headings of each table in it])
SNAPSHOT = [
    ("Test particulars", [["item", "value"]]),
    ("Summary", []),
    ("Test conditions and reference conditions",
     [["condition", "during the test", "U95", "reference", "test − reference", "unit"]]),
    ("Test window and stability",
     [["tag", "mean", "largest deviation", "drift", "permissible variation", "unit", "ratio",
       "steady"]]),
    ("Excluded samples", [["tag", "reason", "samples", "first", "last"]]),
    ("Averaged measurements",
     [["tag", "quantity", "mean", "U95", "unit", "u random", "u systematic",
       "degrees of freedom", "samples", "excluded"]]),
    ("Reconciliation",
     [["tag dropped", "\\|z\\| before the step", "chi² before the step", "degrees of freedom",
       "p before the step", "tied with"],
      ["tag", "measured", "U95 without reconciliation", "reconciled",
       "U95 with reconciliation", "adjustment", "unit", "z", "flags"],
      ["equipment", "type", "mass imbalance [kg/s]", "energy imbalance [kW]",
       "energy throughput [MW]"]]),
    ("Results", [["result", "value", "U95", "unit", "u", "name"]]),
    ("Corrections to reference conditions",
     [["result", "condition", "during the test", "reference", "unit", "kind",
       "factor or offset", "change", "unit of change", "change [%]"]]),
    ("Monte Carlo check",
     [["result", "Monte Carlo 95 % interval", "linear y ± U95", "unit", "u Monte Carlo",
       "u linear", "u ratio", "end difference [% of U95]"]]),
    ("Uncertainty budgets", None),  # one table per budgeted result, checked below
    ("Energy and exergy",
     [["equipment", "type", "exergy in [MW]", "exergy out [MW]", "work in [MW]",
       "work out [MW]", "heat [MW]", "exergy destroyed [MW]", "u destroyed [MW]",
       "Gouy-Stodola [MW]", "share [%]"]]),
    ("Guarantees",
     [["result", "corrected value", "U95", "guarantee", "guaranteed value", "unit", "verdict",
       "rule"]]),
    ("Notes", []),
    ("Audit record", []),
    ("Audit trail", []),
    ("Run time", [["stage", "time [s]", "share [%]"]]),
]  # fmt: skip


def structure(md: str) -> list:
    """[(h2 heading, [table column headings, ...]), ...] of a Markdown report."""
    lines = md.splitlines()
    out: list = []
    for i, line in enumerate(lines):
        if line.startswith("## "):
            out.append((line[3:], []))
        elif line.startswith("| ") and i + 1 < len(lines) and re.match(r"\|:?---", lines[i + 1]):
            out[-1][1].append([c.strip() for c in line.strip().strip("|").split(" | ")])
    return out


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from perftest import demo as d

    out = tmp_path_factory.mktemp("report")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        o = d.run_pipeline(
            DATA / "plant.toml", [DATA / "historian.csv", DATA / "logger.csv"], out_dir=out
        )
    o.md = (out / "report.md").read_text(encoding="utf-8")
    o.html = (out / "report.html").read_text(encoding="utf-8")
    return o


def test_report_structure_snapshot(demo):
    got = structure(demo.md)
    assert [h for h, _ in got] == [h for h, _ in SNAPSHOT]
    for (heading, tables), (_, expected) in zip(got, SNAPSHOT, strict=True):
        if expected is not None:
            assert tables == expected, heading


def test_every_guaranteed_result_has_a_budget(demo):
    budgets = dict(structure(demo.md))["Uncertainty budgets"]
    guaranteed = list(demo.performance.guarantees["quantity"])
    section = demo.md.split("## Uncertainty budgets")[1].split("\n## ")[0]
    for name in guaranteed:
        assert f"({name}); contributions in" in section, name
    assert len(budgets) >= len(guaranteed)
    for cols in budgets:
        assert cols[:4] == ["input", "estimate", "u", "unit"]
        assert cols[-1] == "share of variance [%]"


def test_numbers_are_written_for_people(demo):
    md = demo.md
    tables = "\n".join(line for line in md.splitlines() if line.startswith("|"))
    assert not re.search(r"\d[eE][+-]?\d", tables)  # no e-notation in any table
    assert "degC" not in tables and "°C" in tables
    assert "±" in md
    # headings in words: no snake_case column heading
    for _, tabs in structure(md):
        for cols in tabs:
            assert not any(re.fullmatch(r"[a-z]+(_[a-z0-9]+)+", c) for c in cols), cols
    # dof of a practically infinite number of samples is not written out
    assert ">1000" in tables


def test_guarantee_lines_state_value_U95_and_guarantee(demo):
    g = demo.performance.guarantees
    for q, verdict in zip(g["quantity"], g["verdict"], strict=True):
        line = next(x for x in demo.md.splitlines() if x.startswith(f"- Guarantee {q}:"))
        assert re.search(r"± [0-9.]+ \S+ \(U95\) against [≥≤] [0-9.]+", line), line
        assert line.rstrip().endswith(f"{verdict} (rule {g.set_index('quantity').loc[q, 'rule']})")


def test_exergy_heat_column_is_in_MW(demo):
    et = T.exergy_table(
        ReportData(exergy=demo.performance.exergy, results=demo.performance.results)
    ).set_index("equipment")
    heat_w = demo.performance.exergy.set_index("unit")["heat"]
    for uid, w in heat_w.dropna().items():
        assert et.loc[uid, "heat"] == pytest.approx(w / 1e6, rel=1e-12)


def test_conditions_table_in_plant_file_units(demo):
    section = demo.md.split("## Test conditions and reference conditions")[1].split("\n## ")[0]
    row = next(x for x in section.splitlines() if x.startswith("| cw_in.temperature"))
    cells = [c.strip() for c in row.strip("|").split("|")]
    # the plant file's reference is 15 degC (sample_data/brackenfold/plant.toml)
    assert float(cells[3]) == pytest.approx(15.0) and cells[5] == "°C"


def test_volume_flow_tag_shown_in_its_unit_with_its_density():
    # 277 kg/s of water logged in m3/h at 998.2 kg/m3: 277 * 3600 / 998.2 m3/h
    meas = pd.DataFrame(
        {
            "tag": ["FT-201"],
            "quantity": ["mass_flow"],
            "value": [277.0],
            "unit": ["kg/s"],
            "u_random": [0.1],
            "u_systematic": [1.0],
            "u": [float(np.hypot(0.1, 1.0))],
            "dof": [np.inf],
            "n_samples": [100],
            "n_excluded": [0],
        }
    )
    data = ReportData(
        units={"FT-201": "m3/h"},
        quantities={"FT-201": "mass_flow"},
        densities={"FT-201": 998.2},
        measurements=meas,
    )
    mt = T.measurements_table(data).set_index("tag")
    assert mt.loc["FT-201", "unit"] == "m3/h"
    assert mt.loc["FT-201", "mean"] == pytest.approx(277.0 * 3600 / 998.2, rel=1e-12)
    # without the density the label falls back with the number (never m3/h on kg/s)
    bare = T.measurements_table(ReportData(units={"FT-201": "m3/h"}, measurements=meas))
    assert bare.loc[0, "unit"] == "kg/s" and bare.loc[0, "mean"] == pytest.approx(277.0)
    assert "m3/h" not in render_markdown(ReportData(units={"FT-201": "m3/h"}, measurements=meas))


def test_html_prints_on_a4(demo):
    html = demo.html
    assert "@page" in html and "size: A4" in html and "@media print" in html
    assert "display: table-header-group" in html  # table headings repeat on each page
    # numbers right-aligned, text left-aligned, tag ids never wrapped
    assert re.search(r'<td class="num">−?[0-9.]+</td>', html)
    assert '<td class="id">FT-171</td>' in html


def test_figures_are_paged_with_bands(demo):
    from perftest.report.figures import STABILITY_TAGS_PER_PAGE

    n_tags = len(demo.window_run.stability().index)
    pages = -(-n_tags // STABILITY_TAGS_PER_PAGE)
    stems = re.findall(r"figures/(stability(?:_\d+)?)\.png", demo.md)
    assert len(set(stems)) == pages


def test_tables_generic_over_plant_kinds():
    """Results of another plant kind (names from the contract's table of kinds) get
    units by their SI unit and size, and a guaranteed COP reads as a plain number."""
    names = {
        "cooling_capacity": (2.4e6, 2.0e4, "W"),
        "power_input": (6.0e5, 5.0e3, "W"),
        "cop": (4.0, 0.05, "1"),
        "carnot_cop": (9.1, 0.02, "1"),
        "second_law_efficiency": (0.44, 0.006, "1"),
        "corrected_cop": (4.1, 0.05, "1"),
    }
    res = pd.DataFrame(
        {
            "value": [v[0] for v in names.values()],
            "u": [v[1] for v in names.values()],
            "U95": [1.96 * v[1] for v in names.values()],
            "unit": [v[2] for v in names.values()],
            "description": list(names),
        },
        index=pd.Index(list(names), name="name"),
    )
    g = pd.DataFrame(
        [dict(quantity="corrected_cop", corrected_value=4.1, U95=0.098, guaranteed=3.9,
              direction="at_least", verdict="met", unit="", rule="guarded")]
    )  # fmt: skip
    data = ReportData(results=res, guarantees=g)
    rt = T.results_table(data).set_index("name")
    assert rt.loc["cooling_capacity", "unit"] == "MW"
    assert rt.loc["power_input", "unit"] == "kW"  # below 1 MW: kW
    assert rt.loc["power_input", "value"] == pytest.approx(600.0)
    assert rt.loc["cop", "unit"] == "1" and rt.loc["cop", "value"] == pytest.approx(4.0)
    assert rt.loc["second_law_efficiency", "unit"] == "%"
    md = render_markdown(data)
    line = next(x for x in md.splitlines() if x.startswith("- Guarantee corrected_cop"))
    assert (
        line == "- Guarantee corrected_cop: 4.100 ± 0.098 (U95) against ≥ 3.9: met (rule guarded)"
    )


def test_a_shared_elimination_step_says_none_was_dropped(demo):
    # A step over instruments the tests cannot tell apart drops none of them (the
    # engine takes out the bias they share): the report must not name a "dropped" tag.
    import dataclasses

    from perftest.report import data as report_data

    base = report_data.collect(
        demo.plant, demo.run, demo.window_run, demo.measurements, demo.reconciliation,
        demo.performance,
    )  # fmt: skip
    step = dict(tag="FT-101", z=4.1, chi2=20.0, dof=3, p_value=1e-4, tied_with="FT-161",
                shared=True, redundancy_lost=1)  # fmt: skip
    md = render_markdown(dataclasses.replace(base, eliminated=[step]))
    section = md.split("## Reconciliation")[1].split("\n## ")[0]
    assert "none (FT-101 and tied: shared bias taken out)" in section
    assert "None of them was dropped" in section
    assert "1 degree(s) of freedom" in section
    plain = dict(step, shared=False, tied_with="", redundancy_lost=0)
    md = render_markdown(dataclasses.replace(base, eliminated=[plain]))
    section = md.split("## Reconciliation")[1].split("\n## ")[0]
    assert "None of them was dropped" not in section and "| FT-101 |" in section
