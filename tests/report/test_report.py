"""perftest.report: summary.json contract, tables, Markdown/HTML and figures.

The report layer takes plain tables, so these tests build a small ReportData by
hand.  The outside reference for the JSON keys is the contract in the design
notes (``summary.json`` holds at least global_test, measurements, results and
guarantees with the keys listed there); unit conversions are checked against
exact definitions (1 kWh = 3600 kJ; 1 Btu_IT = 1.05505585262 kJ, NIST SP 811
Appendix B; 0 degC = 273.15 K).
"""

from __future__ import annotations

import base64
import json
import math
import re

import numpy as np
import pandas as pd
import pytest

from perftest.report import (
    ReportData,
    dumps,
    render_html,
    render_markdown,
    summary_json,
    write_reports,
)
from perftest.report import tables as T
from perftest.report.figures import all_figures

CONTRACT_TOP = {"global_test", "measurements", "results", "guarantees"}
CONTRACT_GT = {"chi2", "dof", "p_value", "passed"}
CONTRACT_MEAS = {"tag", "measured", "u_measured", "reconciled", "u_reconciled", "z", "suspect"}
CONTRACT_RES = {"value", "u", "U95", "unit"}
CONTRACT_GUAR = {"quantity", "corrected_value", "U95", "guaranteed", "direction", "verdict"}
REQUIRED_RESULTS = {
    "first_law_efficiency",
    "carnot_efficiency",
    "second_law_efficiency",
    "source_temperature",
    "sink_temperature",
}


def _results() -> pd.DataFrame:
    rows = {
        "net_power": (33.8e6, 0.1e6, "W"),
        "auxiliary_power": (2.1e6, 0.01e6, "W"),
        "heat_input": (107.9e6, 0.6e6, "W"),
        "fuel_exergy": (112.0e6, 0.6e6, "W"),
        "first_law_efficiency": (0.3138, 0.0019, "1"),
        "heat_rate": (3.1866, 0.02, "J/J"),
        "source_temperature": (783.15, 0.4, "K"),
        "sink_temperature": (291.15, 0.05, "K"),
        "carnot_efficiency": (0.6282, 0.0005, "1"),
        "curzon_ahlborn_efficiency": (0.3903, 0.0004, "1"),
        "second_law_efficiency": (0.4995, 0.003, "1"),
        "corrected_net_power": (34.0e6, 0.1e6, "W"),
    }
    df = pd.DataFrame(
        {
            "value": [v[0] for v in rows.values()],
            "u": [v[1] for v in rows.values()],
            "unit": [v[2] for v in rows.values()],
        },
        index=pd.Index(list(rows), name="name"),
    )
    df["U95"] = 1.96 * df["u"]
    df["k"] = 1.96
    df["dof"] = np.inf
    df["description"] = df.index
    return df


def _data(**over) -> ReportData:
    rec = pd.DataFrame(
        {
            "tag": ["FT-101", "FT-171", "TT-101", "JT-102"],
            "quantity": ["mass_flow", "mass_flow", "temperature", "power"],
            "measured": [36.0, 37.1, 783.0, 2.1e6],
            "u_measured": [0.27, 0.19, 0.77, 1.1e4],
            "reconciled": [36.05, 36.04, 783.1, 2.1e6],
            "u_reconciled": [0.15, 0.15, 0.7, 1.1e4],
            "adjustment": [0.05, -1.06, 0.1, 0.0],
            "z": [0.3, -4.5, 0.2, np.nan],
            "redundant": [True, True, True, False],
            "suspect": [False, True, False, False],
            "in_balance": [True, True, True, False],
            "eliminated": [False, True, False, False],
        }
    )
    meas = pd.DataFrame(
        {
            "tag": ["PT-101", "TT-101"],
            "quantity": ["pressure", "temperature"],
            "value": [9.0e6, 783.15],
            "unit": ["Pa", "K"],
            "u_random": [2e3, 0.05],
            "u_systematic": [2e4, 0.77],
            "u": [2.01e4, 0.77],
            "dof": [50.0, np.inf],
            "n_samples": [119, 120],
            "n_excluded": [1, 0],
        }
    )
    idx = pd.date_range("2026-05-14 08:00", periods=240, freq="1min", tz="UTC")
    trends = pd.DataFrame(
        {"JT-101A": 36e6 + np.sin(np.arange(240) / 9) * 5e4, "TT-101": 783.0 + 0 * idx.day},
        index=idx,
    )
    guarantees = pd.DataFrame(
        [
            dict(
                quantity="corrected_net_power",
                corrected_value=34.0e6,
                U95=0.2e6,
                guaranteed=33.0e6,
                direction="at_least",
                verdict="met",
                unit="MW",
                margin=1e6,
            )
        ]
    )
    budgets = {
        "first_law_efficiency": pd.DataFrame(
            {
                "estimate": [36e6, 2.3, 4.7e7],
                "u": [5e4, 0.006, 7e4],
                "sensitivity": [8.7e-9, -0.136, -6.7e-9],
                "u_contribution": [4.3e-4, 8e-4, 4.7e-4],
                "share": [0.2, 0.6, 0.2],
            },
            index=pd.Index(["JT-101", "FT-201", "fuel.lhv"], name="input"),
        )
    }
    exergy = pd.DataFrame(
        {
            "unit": ["boiler", "turbine", "condenser"],
            "type": ["boiler", "turbine", "condenser"],
            "exergy_in": [1.2e8, 5e7, 1e7],
            "exergy_out": [4.5e7, 1e7, 6e6],
            "work_in": [1.12e8, 0, 0],
            "work_out": [0, 3.65e7, 0],
            "destroyed": [6.7e7, 3.5e6, 4e6],
            "u_destroyed": [np.nan, 2e5, 1e5],
            "gouy_stodola": [np.nan, 3.5e6, 4e6],
            "share": [0.6, 0.03, 0.035],
            "heat": [9.7e7, np.nan, 6.1e7],
        }
    )
    base = dict(
        title="Test unit",
        window={
            "start": "2026-05-14T10:00:00+00:00",
            "end": "2026-05-14T12:00:00+00:00",
            "how": "steadiest 2h window",
        },
        units={
            "FT-101": "t/h",
            "FT-171": "t/h",
            "TT-101": "degC",
            "PT-101": "barg",
            "JT-102": "MW",
            "JT-101A": "MW",
        },
        atmospheric_pressure=100_800.0,
        measurements=meas,
        reconciliation=rec,
        global_test={"chi2": 3.1, "dof": 2, "p_value": 0.21, "passed": True},
        eliminated=[{"tag": "FT-171", "z": -4.5, "chi2": 24.0, "dof": 3, "p_value": 2.5e-5}],
        exclusions=pd.DataFrame(
            {
                "time": [idx[5], idx[6]],
                "tag": ["PT-101", "PT-101"],
                "reason": ["sentinel text 'Bad'", "blank cell"],
                "raw_value": ["Bad", ""],
                "source": ["historian"] * 2,
            }
        ),
        results=_results(),
        budgets=budgets,
        guarantees=guarantees,
        exergy=exergy,
        exergy_losses={"cooling water": 1.5e6},
        trends=trends,
        timings={"read run": 1.0, "reconcile": 0.5},
        notes=["a note"],
        missing=[],
    )
    base.update(over)
    return ReportData(**base)


def test_summary_has_contract_structure():
    s = summary_json(_data())
    assert CONTRACT_TOP <= set(s)
    assert set(s["global_test"]) >= CONTRACT_GT
    assert isinstance(s["global_test"]["passed"], bool) and isinstance(s["global_test"]["dof"], int)
    for m in s["measurements"]:
        assert CONTRACT_MEAS <= set(m)
        assert isinstance(m["suspect"], bool)
    assert REQUIRED_RESULTS <= set(s["results"])
    for r in s["results"].values():
        assert CONTRACT_RES <= set(r)
    for g in s["guarantees"]:
        assert CONTRACT_GUAR <= set(g)
        assert g["direction"] in ("at_least", "at_most")
        assert g["verdict"] in ("met", "not met", "inconclusive")
    assert any(k.startswith("corrected_") for k in s["results"])


def test_summary_is_strict_json_with_null_for_nan():
    s = summary_json(_data())
    text = dumps(s)  # allow_nan=False: raises on any NaN left
    back = json.loads(text)
    jt = next(m for m in back["measurements"] if m["tag"] == "JT-102")
    assert jt["z"] is None
    assert "NaN" not in text and "Infinity" not in text
    # SI inside the summary: temperature in K, efficiency as a fraction.
    assert back["results"]["source_temperature"]["value"] == pytest.approx(783.15)
    assert back["results"]["source_temperature"]["unit"] == "K"
    assert 0 < back["results"]["first_law_efficiency"]["value"] < 1


def test_summary_without_reconciliation_still_has_contract_keys():
    s = summary_json(ReportData(title="bare"))
    assert CONTRACT_TOP <= set(s)
    assert s["global_test"] == {"chi2": None, "dof": None, "p_value": None, "passed": None}
    assert REQUIRED_RESULTS <= set(s["results"])
    json.loads(dumps(s))


def test_results_table_display_units():
    t = _data()
    rt = T.results_table(t).set_index(["name", "unit"])
    # Exact unit definitions: 1 J/J = 3600 kJ/kWh; 1 Btu_IT = 1.05505585262 kJ.
    assert rt.loc[("heat_rate", "kJ/kWh"), "value"] == pytest.approx(3.1866 * 3600, rel=1e-12)
    assert rt.loc[("heat_rate", "Btu/kWh"), "value"] == pytest.approx(
        3.1866 * 3600 / 1.05505585262, rel=1e-12
    )
    assert rt.loc[("source_temperature", "degC"), "value"] == pytest.approx(510.0, abs=1e-9)
    assert rt.loc[("source_temperature", "degC"), "u"] == pytest.approx(0.4)  # interval
    assert rt.loc[("first_law_efficiency", "%"), "value"] == pytest.approx(31.38)
    assert rt.loc[("net_power", "MW"), "U95"] == pytest.approx(0.196)


def test_measurement_tables_use_logged_units():
    mt = T.measurements_table(_data()).set_index("tag")
    # barg = (p - p_atm) / 1e5 with the barometer at 100.8 kPa.
    assert mt.loc["PT-101", "mean"] == pytest.approx((9.0e6 - 100_800.0) / 1e5, rel=1e-9)
    assert mt.loc["PT-101", "u"] == pytest.approx(0.201, rel=1e-9)  # no gauge shift on u
    assert mt.loc["TT-101", "mean"] == pytest.approx(510.0, abs=1e-9)
    rt = T.reconciliation_table(_data()).set_index("tag")
    assert rt.loc["FT-171", "measured"] == pytest.approx(37.1 * 3.6, rel=1e-9)  # kg/s -> t/h
    assert bool(rt.loc["FT-171", "suspect"])


def test_markdown_and_html_carry_caution_window_exclusions_and_suspects():
    data = _data()
    md = render_markdown(data, figures=("reconciliation",))
    html = render_html(data)
    for text in (md, html):
        assert "does not replace" in text  # the caution
        assert "2026-05-14T10:00:00" in text  # the window
        assert "sentinel text" in text  # excluded samples with reasons
        assert "FT-171" in text and "serial elimination" in text  # dropped instrument
        assert "met" in text
    # Suspect rows highlighted: bold in Markdown, class="flag" in HTML.
    assert re.search(r"\| \*\*FT-171\*\* \|", md)
    assert re.search(r'<tr class="flag"><td class="id">FT-171</td>', html)
    assert "figures/reconciliation.png" in md


def test_html_is_self_contained():
    data = _data()
    figs = all_figures(data)
    from perftest.report.figures import figure_png

    pngs = {k: figure_png(v) for k, v in figs.items()}
    html = render_html(data, figures=pngs)
    assert "<link" not in html and "<script" not in html
    assert not re.search(r'src="(?!data:)', html)  # every image inline
    imgs = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html)
    assert len(imgs) == len(pngs) >= 4
    assert base64.b64decode(imgs[0])[:8] == b"\x89PNG\r\n\x1a\n"


def test_figures_have_labels_titles_and_no_overlapping_text():
    import matplotlib

    matplotlib.use("Agg")
    figs = all_figures(_data())
    assert {"stability", "reconciliation", "budget", "efficiency", "flows"} <= set(figs)
    for stem, fig in figs.items():
        fig.canvas.draw()
        renderer = fig.canvas.get_renderer()
        titled = bool(fig._suptitle) or any(ax.get_title() for ax in fig.axes)
        assert titled, stem
        for ax in fig.axes:
            assert ax.get_xlabel() or ax.get_ylabel(), stem
            # Tick labels must not overlap each other (readable axes).
            boxes = [t.get_window_extent(renderer) for t in ax.get_yticklabels() if t.get_text()]
            for a, b in zip(boxes, boxes[1:], strict=False):
                assert not a.overlaps(b), f"{stem}: overlapping y tick labels"
    import matplotlib.pyplot as plt

    for fig in figs.values():
        plt.close(fig)


def test_write_reports_writes_every_file(tmp_path):
    written = write_reports(_data(), tmp_path)
    assert (tmp_path / "summary.json").is_file()
    assert (tmp_path / "report.md").is_file() and (tmp_path / "report.html").is_file()
    pngs = sorted(p.name for p in (tmp_path / "figures").glob("*.png"))
    assert pngs == sorted(f"{k}.png" for k in written["figures"])
    s = json.loads((tmp_path / "summary.json").read_text(encoding="utf-8"))
    assert s["results"]["net_power"]["value"] == pytest.approx(33.8e6)
    assert math.isclose(s["timings"]["read run"], 1.0)


@pytest.mark.parametrize(
    ("value", "U", "expected"),
    # GUM (JCGM 100:2008) 7.2.6: give U with at most two significant digits and
    # round the value to the same place (from memory).
    [(33.8547, 0.0701, ("33.855", "0.070")), (11475.7, 71.7, ("11476", "72")),
     (31.3708, 0.196, ("31.37", "0.20"))],
)  # fmt: skip
def test_results_are_rounded_to_their_uncertainty(value, U, expected):
    from perftest.report.document import fmt_uncertain

    assert fmt_uncertain(value, U) == expected


def test_figure_png_draws_once_and_matches_savefig():
    """figure_png: one draw, opaque white PNG at PNG_DPI, the pixels of savefig."""
    import io

    from matplotlib.figure import Figure
    from PIL import Image

    from perftest.report.figures import PNG_DPI, figure_png

    fig = all_figures(_data())["budget"]
    draws = []
    original = Figure.draw

    def counting_draw(self, renderer):
        draws.append(1)
        return original(self, renderer)

    Figure.draw = counting_draw
    try:
        png = figure_png(fig)
    finally:
        Figure.draw = original
    # savefig would draw a constrained-layout figure twice (layout pass + picture)
    assert len(draws) == 1
    img = Image.open(io.BytesIO(png))
    w_in, h_in = fig.get_size_inches()
    # pixel size is size [in] x dpi, rounded by matplotlib to whole pixels
    assert img.size == (round(w_in * PNG_DPI), round(h_in * PNG_DPI))
    assert img.mode == "RGB"
    assert fig.get_dpi() == 100  # the figure's own dpi is restored
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=PNG_DPI, facecolor="white")
    ref = np.asarray(Image.open(buf).convert("RGB"), dtype=int)
    ours = np.asarray(img, dtype=int)
    # Same figure, same Agg renderer and dpi: the pixels agree except where the
    # second layout pass of savefig nudges an artist by a pixel; allow 3 % of the
    # pixels to differ (measured: 0 % for this figure, 2 % for the flows figure).
    assert ours.shape == ref.shape
    assert (np.abs(ours - ref).sum(axis=-1) > 0).mean() < 0.03


def test_written_pngs_are_the_embedded_pngs(tmp_path):
    written = write_reports(_data(), tmp_path)
    html = (tmp_path / "report.html").read_text(encoding="utf-8")
    embedded = {
        base64.b64decode(b)
        for b in re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html)
    }
    files = {p.read_bytes() for p in written["figures"].values()}
    # one rendering serves both: byte-identical files and data URIs
    assert files == embedded and len(files) >= 4


def test_part_load_figure_keeps_one_unit_on_its_y_axis():
    """An efficiency [%] and a heat rate [kJ/kWh] are not drawn on one y axis;
    two COPs (both plain ratios) are."""
    from types import SimpleNamespace

    import matplotlib.pyplot as plt

    from perftest.report.campaign import part_load_figure

    def window(label, power, eff, hr, cop):
        res = pd.DataFrame(
            {"value": [power, eff, hr, cop, cop * 0.98], "U95": [1e5, 0.002, 0.02, 0.1, 0.1],
             "unit": ["W", "1", "J/J", "1", "1"]},
            index=["net_power", "first_law_efficiency", "corrected_heat_rate", "cop",
                   "corrected_cop"],
        )  # fmt: skip
        return {"label": label, "results": res}

    def figure(drop):
        wins = [window("A", 34e6, 0.31, 3.2, 5.0), window("B", 25e6, 0.30, 3.3, 5.5)]
        for w in wins:
            w["results"] = w["results"].drop(index=drop)
        return part_load_figure(SimpleNamespace(campaign={"mode": "points", "windows": wins}))

    fig = figure(["cop", "corrected_cop"])
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels == ["first_law_efficiency [%]"]
    assert ax.get_ylabel() == "result [%]"
    plt.close(fig)
    fig = figure(["first_law_efficiency", "corrected_heat_rate"])
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels == ["cop [–]", "corrected_cop [–]"]
    plt.close(fig)


def test_part_load_figure_skips_a_result_one_point_lacks():
    from types import SimpleNamespace

    import matplotlib.pyplot as plt

    from perftest.report.campaign import part_load_figure

    def res(names, cop):
        full = pd.DataFrame(
            {"value": [800e3, cop, cop * 0.98], "U95": [5e3, 0.1, 0.1], "unit": ["W", "1", "1"]},
            index=["cooling_capacity", "cop", "corrected_cop"],
        )
        return full.loc[names]

    wins = [
        {"label": "100 %", "results": res(["cooling_capacity", "cop", "corrected_cop"], 5.0)},
        {"label": "50 %", "results": res(["cooling_capacity", "cop"], 5.6)},
    ]
    fig = part_load_figure(SimpleNamespace(campaign={"mode": "points", "windows": wins}))
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert labels == ["cop [–]"]
    plt.close(fig)
