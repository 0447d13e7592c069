"""The heat-pump kind from a plant file through ``perftest report``, ``plan`` and ``monitor``.

A logged run of tests/data/plants/heat_pump_r134a.toml is generated here: the true
operating point comes from CoolProp directly (R134a by its Helmholtz equation, water by
IAPWS-IF97), with states that close the refrigerant, source-water and heating-water
balances (the construction of tests/evaluation/test_kinds.py, ``heat_pump_truth``), so
the truth does not come from perftest.  A seeded numpy generator adds a slow wander of
the load, a fixed offset per instrument inside its stated uncertainty and sample
scatter, and writes one CSV row a minute for 3 hours.

Outside checks: the true heating capacity, power and COP (CoolProp heat balance); the
Carnot COP of a heat pump, T_hot / (T_hot - T_cold), and the second-law efficiency
COP / Carnot COP (Cengel & Boles, Thermodynamics: An Engineering Approach, ch. 6 for
the reversible heat pump and ch. 8 for the second-law efficiency, from memory); the
exergy of heat Q delivered at T, Q (1 - T0 / T).
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import sys
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from perftest.cli import main
from perftest.evaluation.plant_keys import KEY_RESULTS

sys.path.insert(0, str(Path(__file__).resolve().parent / "evaluation"))
from test_kinds import heat_pump_truth  # noqa: E402  (the CoolProp truth of the plant)

PLANT = Path(__file__).resolve().parent / "data" / "plants" / "heat_pump_r134a.toml"
C = 273.15
POWER = 250e3  # compressor power at the mean load [W]
WANDER = 0.005  # amplitude of the slow load wander, as a fraction of the power [1]
RESULTS = (
    "heating_capacity",
    "power_input",
    "cop",
    "carnot_cop",
    "second_law_efficiency",
    "exergetic_efficiency",
)
# tag -> (unit written in the CSV, factor from SI, offset from SI)
TO_FILE = {"bar": (1e-5, 0.0), "degC": (1.0, -C), "kg/s": (1.0, 0.0), "kW": (1e-3, 0.0)}


def _stated_u(spec: dict, value_file: float) -> float:
    """Standard uncertainty of a reading in the tag's unit, from the plant file's
    ``uncertainty`` table (no ``level`` given: stated at 95 %, k = 1.96, as
    docs/plant-file.md says; JCGM 100:2008 Table G.1)."""
    u = spec["uncertainty"]
    if u["kind"] == "absolute":
        expanded = u["value"]
    elif u["kind"] == "percent_of_reading":
        expanded = abs(value_file) * u["value"] / 100.0
    else:  # pragma: no cover - the plant file uses only these two
        raise AssertionError(u["kind"])
    return expanded / 1.959963984540054


def write_run(path: Path, seed: int = 20261205) -> dict:
    """Write 3 h of 1-min readings of the heat pump to ``path``; return the truth.

    The load wanders by up to ``WANDER`` as one plus two whole sine periods over the
    run (zero mean over the run), so each window's mean readings sit at the true point
    of the window's mean load (``true_results``).  Between the points at ``POWER``
    and ``POWER (1 + WANDER)`` the readings are interpolated linearly (the curvature
    over 0.5 % of load is of order 1e-5 relative, far inside every uncertainty here).
    """
    spec = tomllib.loads(PLANT.read_text(encoding="utf-8"))["tags"]
    base, truth = heat_pump_truth(POWER)
    high, high_truth = heat_pump_truth(POWER * (1.0 + WANDER))
    rng = np.random.default_rng(seed)
    n = 180
    t = np.arange(n) / n
    # zero mean over the n samples: both terms are whole periods of a sine
    f = 0.7 * np.sin(2 * np.pi * t) + 0.3 * np.sin(4 * np.pi * t + 1.0)
    f -= f.mean()  # exactly zero mean in floating point as well
    columns = {}
    for tag, true in base.items():
        unit = spec[tag]["unit"]
        scale, shift = TO_FILE[unit]
        v0 = true * scale + shift
        v1 = high[tag] * scale + shift
        u = _stated_u(spec[tag], v0)
        # fixed instrument offset: half the standard uncertainty times a normal
        # draw, clipped to one standard uncertainty (inside what the file states)
        offset = u * float(np.clip(0.5 * rng.standard_normal(), -1.0, 1.0))
        # sample scatter: AR(1) with a 3-min correlation time, sigma = u / 2
        phi = math.exp(-1.0 / 3.0)
        e = np.empty(n)
        e[0] = rng.normal(0.0, 0.5 * u)
        w = rng.normal(0.0, 0.5 * u * math.sqrt(1 - phi * phi), n)
        for i in range(1, n):
            e[i] = phi * e[i - 1] + w[i]
        columns[tag] = v0 + (v1 - v0) * f + offset + e
    stamps = pd.date_range("2026-11-03 09:00", periods=n, freq="1min")
    lines = [
        "Timestamp," + ",".join(columns),
        "units," + ",".join(spec[t]["unit"] for t in columns),
    ]
    for i, s in enumerate(stamps):
        lines.append(
            s.strftime("%Y-%m-%d %H:%M:%S")
            + ","
            + ",".join(f"{columns[c][i]:.6g}" for c in columns)
        )
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return {
        "base": _results(truth),
        "high": _results(high_truth),
        "stamps": stamps.tz_localize("UTC"),  # the plant file's timezone
        "load": f,
        "Th": truth["Th"],
        "Tc": truth["Tc"],
    }


def _results(truth: dict) -> dict:
    """The heat pump's results from a CoolProp truth of ``heat_pump_truth``."""
    Th, Tc = truth["Th"], truth["Tc"]
    cop = truth["heating_capacity"] / truth["power_input"]
    carnot = Th / (Th - Tc)
    T0 = C + 5.0  # the plant file's dead_state_temperature
    return {
        "heating_capacity": truth["heating_capacity"],
        "power_input": truth["power_input"],
        "cop": cop,
        "carnot_cop": carnot,
        "second_law_efficiency": cop / carnot,
        # exergy of the heat delivered at the heating-water supply temperature,
        # Q (1 - T0 / T), over the compressor power
        "exergetic_efficiency": truth["heating_capacity"] * (1 - T0 / Th) / truth["power_input"],
    }


def true_results(run: dict, start, end) -> dict:
    """True results over the samples from ``start`` to ``end`` (end excluded).

    The readings are linear in the load fraction between the two CoolProp points, so
    the window's mean readings are the point at the window's mean load fraction; the
    results are interpolated the same way (their curvature over 0.5 % of load is of
    order 1e-5 relative, far inside every U95 here).
    """
    start, end = pd.Timestamp(start), pd.Timestamp(end)
    inside = (run["stamps"] >= start) & (run["stamps"] < end)
    assert inside.sum() >= 10, (start, end)
    fbar = float(run["load"][inside].mean())
    return {k: v + (run["high"][k] - v) * fbar for k, v in run["base"].items()}


def _run(argv: list[str]) -> tuple[int, str]:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        code = main(argv)
    return code, out.getvalue()


@pytest.fixture(scope="module")
def commands(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("heat_pump")
    run = tmp / "run.csv"
    truth = write_run(run)
    summary, html, plan = tmp / "summary.json", tmp / "report.html", tmp / "plan.json"
    codes = {
        "report": _run(
            [
                "report",
                str(PLANT),
                "--data",
                str(run),
                "--json",
                str(summary),
                "--html",
                str(html),
                "--quiet",
            ]
        ),  # fmt: skip
        "plan": _run(["plan", str(PLANT), "--json", str(plan)]),
        "monitor": _run(
            [
                "monitor",
                str(PLANT),
                "--data",
                str(run),
                "--every",
                "30min",
                "--out",
                str(tmp / "monitor"),
                "--no-figures",
                "-q",
            ]
        ),  # fmt: skip
    }
    return tmp, truth, codes


def test_generated_run_has_a_units_row_and_three_hours_of_minutes(commands):
    tmp, _, _ = commands
    lines = (tmp / "run.csv").read_text(encoding="utf-8").splitlines()
    assert lines[1].startswith("units,bar,degC,bar,degC,degC,kg/s")
    stamps = pd.to_datetime([ln.split(",")[0] for ln in lines[2:]])
    assert len(stamps) == 180 and (np.diff(stamps) == np.timedelta64(60, "s")).all()


def test_every_command_exits_zero(commands):
    _, _, codes = commands
    for name, (code, printed) in codes.items():
        assert code == 0, (name, printed)


def test_report_gives_the_heat_pump_results_within_U95_of_truth(commands):
    tmp, truth, _ = commands
    summary = json.loads((tmp / "summary.json").read_text(encoding="utf-8"))
    res = summary["results"]
    true = true_results(truth, summary["window"]["start"], summary["window"]["end"])
    for name in RESULTS:
        r = res[name]
        assert {"value", "u", "U95", "unit"} <= set(r), name
        assert np.isfinite([r["value"], r["u"], r["U95"]]).all() and r["U95"] > 0, name
        # the generated offsets are inside the stated uncertainties: each result
        # lies within its own U95 of the truth at the window's mean load
        assert abs(r["value"] - true[name]) <= r["U95"], (name, r, true[name])
    assert res["heating_capacity"]["unit"] == "W" and res["cop"]["unit"] == "1"


def test_report_second_law_figures_follow_their_definitions(commands):
    tmp, _, _ = commands
    res = json.loads((tmp / "summary.json").read_text(encoding="utf-8"))["results"]
    th, tc = res["hot_temperature"]["value"], res["cold_temperature"]["value"]
    # carnot_cop = T_hot / (T_hot - T_cold), second_law = COP / Carnot COP (the
    # definitions; only round-off separates them: 1e-9 relative)
    assert res["carnot_cop"]["value"] == pytest.approx(th / (th - tc), rel=1e-9)
    assert res["second_law_efficiency"]["value"] == pytest.approx(
        res["cop"]["value"] / res["carnot_cop"]["value"], rel=1e-9
    )
    # the temperatures are those of the plant (6 and 45 degC), not of another basis;
    # 0.3 K covers the instruments' 0.05 K U95 and the offsets drawn
    assert tc == pytest.approx(C + 6.0, abs=0.3) and th == pytest.approx(C + 45.0, abs=0.3)


def test_html_report_names_the_second_law_figure(commands):
    tmp, _, _ = commands
    html = (tmp / "report.html").read_text(encoding="utf-8")
    assert "Second-law efficiency (COP / Carnot COP)" in html


def test_plan_predicts_U95_of_the_cop(commands):
    tmp, truth, _ = commands
    plan = json.loads((tmp / "plan.json").read_text(encoding="utf-8"))
    cop = plan["results"]["cop"]
    assert cop["U95_with"] > 0 and math.isfinite(cop["U95_with"])
    # the design point of the file is the true point to the digits written (5-6
    # significant); the predicted COP agrees with truth within its predicted U95
    assert abs(cop["value"] - truth["base"]["cop"]) <= cop["U95_with"]
    # [design.allowed] cop = 3 %: the plan says whether it is reached
    assert cop["U95_allowed"] == pytest.approx(0.03 * cop["value"], rel=1e-9)
    assert cop["within_allowed"] is True


def test_monitor_lists_the_heat_pump_results_and_windows(commands):
    tmp, truth, _ = commands
    info = json.loads((tmp / "monitor" / "monitor.json").read_text(encoding="utf-8"))
    assert info["kind"] == "heat_pump"
    assert list(info["results"]) == list(KEY_RESULTS["heat_pump"])
    assert {"heating_capacity", "cop", "carnot_cop", "second_law_efficiency"} <= set(
        info["results"]
    )
    table = pd.read_csv(tmp / "monitor" / "windows.csv")
    assert len(table) == 6  # 3 h in 30-min windows
    ok = table[table["status"] == "ok"]
    assert len(ok) >= 4  # the load wanders by 0.5 %: most half hours are steady
    # each window against the truth at its own mean load, within its U95 (k = 1.96;
    # the offsets drawn are inside the stated uncertainties, so this holds well
    # inside: a miss would be a bias, not bad luck)
    for _, row in ok.iterrows():
        true = true_results(truth, row["start"], row["end"])
        for name in KEY_RESULTS["heat_pump"]:
            assert abs(row[name] - true[name]) <= 1.959963984540054 * row[f"u_{name}"], (
                name,
                row["start"],
            )
