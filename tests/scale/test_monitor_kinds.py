"""``perftest monitor`` on the chiller and CHP scenarios: the kind's headline results.

Outside checks: the scenarios' truth.json (the true values each generator put into
its logs, from an independent heat balance with CoolProp) at their full-load points,
which the windows of those points must reproduce within their U95; the summary's
medians against pandas medians of the command's own window table (windows.csv); the
figure's bands against matplotlib's artists.
"""

from __future__ import annotations

import contextlib
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from perftest.cli import main
from perftest.evaluation.plant_keys import KEY_RESULTS
from perftest.report.trend import COVERAGE_FACTOR, trend_figure

DATA = Path(__file__).resolve().parents[2] / "sample_data"
SCENARIOS = {
    "ostrenby": ("refrigeration", ["bms.csv", "testlog.csv"]),
    "wrenhollow": ("chp", ["dcs.csv", "testlog.csv"]),
}


@pytest.fixture(scope="module", params=sorted(SCENARIOS))
def monitored(request, tmp_path_factory):
    name = request.param
    kind, files = SCENARIOS[name]
    out = tmp_path_factory.mktemp(name)
    argv = ["monitor", str(DATA / name / "plant.toml")]
    for f in files:
        argv += ["--data", str(DATA / name / f)]
    argv += ["--every", "30min", "--out", str(out), "-q"]
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        assert main(argv) == 0
    info = json.loads((out / "monitor.json").read_text(encoding="utf-8"))
    table = pd.read_csv(out / "windows.csv", parse_dates=["start", "end"])
    truth = json.loads((DATA / name / "truth.json").read_text(encoding="utf-8"))
    return name, kind, out, info, table, truth, printed.getvalue()


def test_summary_lists_the_kinds_headline_results(monitored):
    _, kind, _, info, table, _, _ = monitored
    assert info["kind"] == kind
    assert list(info["results"]) == list(KEY_RESULTS[kind])
    ok = table[table["status"] == "ok"]
    assert len(ok) >= 2  # both scenarios hold steady full-load half hours
    for name, r in info["results"].items():
        v = ok[name].dropna()
        # the CSV prints floats to repr precision: equal to round-off
        assert r["median"] == pytest.approx(float(v.median()), rel=1e-12)
        assert r["min"] == pytest.approx(float(v.min()), rel=1e-12)
        assert r["max"] == pytest.approx(float(v.max()), rel=1e-12)
        u = ok.loc[v.index, f"u_{name}"]
        assert r["median_U95"] == pytest.approx(1.959963984540054 * float(u.median()), rel=1e-12)
        assert r["windows"] == len(v)


def test_full_load_windows_reproduce_truth_within_U95(monitored):
    name, kind, _, _, table, truth, _ = monitored
    if name == "ostrenby":
        point = next(p for p in truth["points"] if p["label"] == "100 %")
        start, end, true = point["start"], point["end"], point["results"]
    else:
        start, end, true = truth["steady_from"], truth["steady_to"], truth["results"]
    tz = table["start"].dt.tz
    lo = (
        pd.Timestamp(start).tz_localize(tz)
        if pd.Timestamp(start).tz is None
        else pd.Timestamp(start)
    )
    hi = pd.Timestamp(end).tz_localize(tz) if pd.Timestamp(end).tz is None else pd.Timestamp(end)
    inside = table[(table["start"] >= lo) & (table["end"] <= hi) & (table["status"] == "ok")]
    assert len(inside) >= 1
    checked = 0
    for result in KEY_RESULTS[kind]:
        if result not in true:
            continue
        for _, row in inside.iterrows():
            # U95 at k = 1.96: a result outside it at a window of the steady point
            # would be a 1-in-20 event per result; the scenarios are seeded, so this
            # is deterministic (observed margins are well inside)
            assert abs(row[result] - true[result]) <= COVERAGE_FACTOR * row[f"u_{result}"], (
                result,
                row["start"],
            )
            checked += 1
    assert checked >= 4


def test_trend_figure_shows_the_kinds_results(monitored):
    _, kind, out, _, table, _, _ = monitored
    assert (out / "trend.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    fig = trend_figure(table, kind=kind)
    *panels, strip = fig.axes
    assert len(panels) == len(KEY_RESULTS[kind])
    assert "mid-time" in strip.get_xlabel()
    i = KEY_RESULTS[kind].index("cop" if kind == "refrigeration" else "heat_export")
    ax = panels[i]
    name = KEY_RESULTS[kind][i]
    assert ax.get_ylabel().startswith(name.replace("_", " ").replace("cop", "COP"))
    # the band is value +- 1.96 u in the panel's unit (COP: a number; heat export: MW)
    scale = 1.0 if name == "cop" else 1e-6
    band = ax.collections[0].get_paths()[0].vertices[:, 1]
    v = table[name].to_numpy(float)
    u = table[f"u_{name}"].to_numpy(float)
    top = np.nanmax((v + COVERAGE_FACTOR * u) * scale)
    assert band.max() == pytest.approx(top, rel=1e-12)
    fig.canvas.draw()


def test_command_prints_each_headline_result(monitored):
    _, kind, _, info, _, _, printed = monitored
    lines = printed.splitlines()
    for name in KEY_RESULTS[kind]:
        line = next(ln for ln in lines if ln.strip().startswith(name + " "))
        assert "median" in line and f"over {info['results'][name]['windows']} ok window" in line
    # a COP is printed as a plain number, a capacity in its power unit
    if kind == "refrigeration":
        cop = next(ln for ln in lines if ln.strip().startswith("cop "))
        assert f"median {info['results']['cop']['median']:.5g} over" in cop
    else:
        heat = next(ln for ln in lines if ln.strip().startswith("heat_export "))
        assert f"median {info['results']['heat_export']['median'] / 1e6:.5g} MW" in heat


def test_monitor_understands_the_load_points_of_the_plant_file(tmp_path):
    # A chiller plant file that lists its three load points ([[points]], times from the
    # scenario's truth.json): monitor.json gives, per point, the windows inside it and
    # the median of their headline results, and the trend figure shades the points.
    # Outside check: each point's median COP against the truth of that point, within
    # the windows' U95 (truth.json is the generator's CoolProp heat balance).
    import matplotlib

    matplotlib.use("Agg")
    name = "ostrenby"
    truth = json.loads((DATA / name / "truth.json").read_text(encoding="utf-8"))
    text = (DATA / name / "plant.toml").read_text(encoding="utf-8")
    for p in truth["points"]:
        text += (
            f'\n[[points]]\nlabel = "{p["label"]}"\nstart = "{p["start"]}"\nend = "{p["end"]}"\n'
        )
    plant = tmp_path / "plant.toml"
    plant.write_text(text, encoding="utf-8")
    out = tmp_path / "out"
    argv = ["monitor", str(plant), "--data", str(DATA / name / "bms.csv"),
            "--data", str(DATA / name / "testlog.csv"),
            "--every", "30min", "--out", str(out), "-q"]  # fmt: skip
    with contextlib.redirect_stdout(io.StringIO()):
        assert main(argv) == 0
    info = json.loads((out / "monitor.json").read_text(encoding="utf-8"))
    table = pd.read_csv(out / "windows.csv", parse_dates=["start", "end"])
    points = info["points"]
    assert [p["label"] for p in points] == [p["label"] for p in truth["points"]]
    for p, t in zip(points, truth["points"], strict=True):
        assert p["windows"] == 2  # a one-hour point holds two 30-min windows
        inside = table[
            (table["start"] >= pd.Timestamp(p["start"]))
            & (table["end"] <= pd.Timestamp(p["end"]))
            & (table["status"] == "ok")
        ]
        assert p["windows_ok"] == len(inside)
        if len(inside):
            cop = p["median_results"]["cop"]
            assert cop == pytest.approx(float(inside["cop"].median()), rel=1e-12)
            U = COVERAGE_FACTOR * float(inside["u_cop"].max())
            assert abs(cop - t["results"]["cop"]) <= U, (p["label"], cop, t["results"]["cop"], U)
    fig = trend_figure(table, kind="refrigeration",
                       spans=[(p["label"], pd.Timestamp(p["start"]), pd.Timestamp(p["end"]))
                              for p in points])  # fmt: skip
    spans = [a for a in fig.axes[0].patches if type(a).__name__ == "Polygon" or
             type(a).__name__ == "Rectangle"]  # fmt: skip
    labels = [t.get_text() for t in fig.axes[0].texts]
    assert all(p["label"] in labels for p in points)
    assert len(spans) >= 3
