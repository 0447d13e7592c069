"""The boiler demo scenario (sample_data/quellmoor): files, truth, and the commands.

* the generator reproduces the bundled files (deterministic, seeded);
* its truth satisfies the definitions it states, checked with CoolProp (IF97 water)
  and the stoichiometry of methane written out by hand;
* ``perftest demo --scenario quellmoor``, ``report``, ``plan`` and ``monitor`` run on
  it and give the boiler results with finite uncertainties.
"""

from __future__ import annotations

import importlib.util
import json
import tomllib
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pytest

import perftest
from perftest import demo
from perftest.cli import main

FOLDER = Path(__file__).resolve().parents[1] / "sample_data" / "quellmoor"
RESULTS = ("boiler_efficiency_direct", "boiler_efficiency_indirect", "boiler_efficiency")


def _truth() -> dict:
    return json.loads((FOLDER / "truth.json").read_text(encoding="utf-8"))


def test_generator_reproduces_the_bundled_files(tmp_path):
    spec = importlib.util.spec_from_file_location("gen_quellmoor", FOLDER / "generate.py")
    gen = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(gen)
    gen.main(tmp_path)
    for f in ("dcs.csv", "plant.toml", "truth.json"):
        assert (tmp_path / f).read_bytes() == (FOLDER / f).read_bytes(), f


def test_scenario_is_registered_and_bundled():
    sc = demo.get_scenario("quellmoor")
    assert sc.kind == "boiler"
    for f in (*sc.files, "plant.toml", "truth.json", "README.md", "generate.py"):
        assert (FOLDER / f).is_file(), f
    with open(FOLDER / "plant.toml", "rb") as fh:
        assert tomllib.load(fh)["performance"]["kind"] == "boiler"


def test_truth_closes_the_input_output_definition():
    t = _truth()
    inp, res = t["inputs"], t["results"]
    # IF97 water from CoolProp directly (not perftest's property layer)
    h_st = CP.PropsSI("H", "P", 12.0e5, "T", 493.15, "IF97::Water")
    h_fw = CP.PropsSI("H", "P", 14.0e5, "T", 378.15, "IF97::Water")
    q = inp["steam_flow"] * (h_st - h_fw)
    # 1e-9: double-precision arithmetic on the same property values
    assert res["useful_heat"] == pytest.approx(q, rel=1e-9)
    eta = q / (inp["fuel_flow"] * inp["lhv"])
    assert res["boiler_efficiency_direct"] == pytest.approx(eta, rel=1e-9)
    losses = sum(res[k] for k in res if k.endswith("_loss") or k == "other_losses")
    # 1e-12: the same sum of a few fractions in double precision, in another order
    assert res["boiler_efficiency_indirect"] == pytest.approx(1.0 - losses, abs=1e-12)


def test_truth_oxygen_and_excess_air_agree_by_hand_for_the_main_component():
    # Excess air from dry O2 for a fuel that is mostly methane: with e the excess
    # air and x_O2 = 0.2095 in dry air, a dry flue gas of a CH4-like fuel has
    # O2 = e * a * 0.2095 / (dry products); the truth's 3.1 % O2 must sit near the
    # 15-16 % excess air that methane alone gives (common practice, no source:
    # "3 % O2 is about 15 % excess air" for natural gas).
    e = _truth()["results"]["excess_air"]
    a = 2.0 / 0.2095  # mol air per mol CH4, stoichiometric
    o2 = e * a * 0.2095 / (1.0 + (1 + e) * a * 0.7905 + e * a * 0.2095)
    # 0.003: the other components (ethane, propane, N2, CO2) shift the dry products
    assert o2 == pytest.approx(0.031, abs=0.003)
    # around the 15-16 % of methane alone, widened by the other components as above
    assert 0.13 < e < 0.18


def test_demo_runs_end_to_end_with_the_boiler_results(tmp_path, capsys):
    assert main(["demo", "--scenario", "quellmoor", "--out", str(tmp_path), "--quiet"]) == 0
    summary = json.loads((tmp_path / "summary.json").read_text(encoding="utf-8"))
    assert summary["global_test"]["passed"]
    truth = _truth()["results"]
    for n in RESULTS:
        r = summary["results"][n]
        assert np.isfinite([r["value"], r["u"], r["U95"]]).all()
        assert abs(r["value"] - truth[n]) <= r["U95"], n
    md = (tmp_path / "report.md").read_text(encoding="utf-8")
    assert "heat-loss method" in md and "Dry flue-gas loss" in md


def test_report_command_on_the_scenario(tmp_path):
    out = tmp_path / "s.json"
    code = main(["report", str(FOLDER / "plant.toml"), "--data", str(FOLDER / "dcs.csv"),
                 "--json", str(out), "--quiet"])  # fmt: skip
    assert code == 0
    res = json.loads(out.read_text(encoding="utf-8"))["results"]
    assert set(RESULTS) <= set(res)


def test_plan_command_on_the_scenario(tmp_path):
    out = tmp_path / "plan.json"
    assert main(["plan", str(FOLDER / "plant.toml"), "--no-what-if", "--json", str(out)]) == 0
    text = out.read_text(encoding="utf-8")
    assert "boiler_efficiency" in text


def test_monitor_command_on_the_scenario(tmp_path):
    code = main(["monitor", str(FOLDER / "plant.toml"), "--data", str(FOLDER / "dcs.csv"),
                 "--every", "1h", "--out", str(tmp_path), "--no-figures", "-q"])  # fmt: skip
    assert code == 0
    import pandas as pd

    table = pd.read_csv(tmp_path / "windows.csv")
    ok = table[table["status"] == "ok"]
    assert len(ok) >= 2
    # every window's reconciled efficiency lies within about U95 (k = 2) of the
    # truth: the instruments' fixed offsets are inside their stated uncertainty
    truth = _truth()["results"]["boiler_efficiency"]
    assert (abs(ok["boiler_efficiency"] - truth) <= 2.0 * ok["u_boiler_efficiency"]).all()


def test_demo_measurements_need_no_instrument_dropped():
    plant, m = demo.demo_measurements("quellmoor")
    rec = perftest.reconcile(plant, m, eliminate=True)
    assert rec.eliminated == () and rec.global_test["passed"]


def _doc_boiler_example() -> str:
    text = (Path(__file__).resolve().parents[1] / "docs" / "plant-file.md").read_text("utf-8")
    section = text.split("### The firing side of a boiler", 1)[1]
    return section.split("```toml\n", 1)[1].split("```", 1)[0]


def test_docs_boiler_example_loads_with_its_three_combustion_rows(tmp_path):
    from perftest.plant.equations import build_model

    path = tmp_path / "boiler.toml"
    path.write_text(_doc_boiler_example(), encoding="utf-8")
    plant = perftest.load_plant(path)
    model = build_model(plant)
    rows = {r.name for r in model.rows if r.owner == "combustion"}
    assert rows == {"combustion:energy", "combustion:air", "combustion:co2"}
    assert {"FT-F", "AT-O2", "AT-CO2", "TT-G", "FT-A"} <= set(model.spec.tag_ids)
