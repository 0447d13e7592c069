"""Notebook views of the pipeline objects: short text, compact HTML, display units."""

from __future__ import annotations

import re
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import perftest
from perftest.display.views import WindowTable
from perftest.run.measurements import Measurements
from perftest.units import from_si, to_si

DATA = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"


@pytest.fixture(scope="module")
def demo():
    from perftest import demo as d

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return d.run_pipeline(
            DATA / "plant.toml", [DATA / "historian.csv", DATA / "logger.csv"], figures=False
        )


def _numbers_before(unit: str, text: str) -> list:
    """Numbers written as 'v ± U unit' in a text."""
    pat = rf"(−?[0-9.]+) ± ([0-9.]+) {re.escape(unit)}"
    return [(float(a.replace("−", "-")), float(b)) for a, b in re.findall(pat, text)]


def test_record_shows_its_value_in_the_unit_it_names():
    # 10 kg/s logged in t/h: the repr must say 36 t/h, not 10 t/h
    m = Measurements.from_values(["FT-1"], [10.0], [0.05], quantities=["mass_flow"], units=["t/h"])
    text = repr(m["FT-1"])
    ((value, U),) = _numbers_before("t/h", text)
    assert value == pytest.approx(36.0, abs=0.05)  # rounded to U95's digits
    # U95 = 1.96 u for infinite dof; 0.05 kg/s = 0.18 t/h (exact factor 3.6)
    # 0.006: U95 is printed to two significant digits (0.35 for 0.3528); a few
    # thousandths more than that rounding, no more
    assert U == pytest.approx(1.96 * 0.18, abs=0.006)
    assert "10 kg/s inside" in text


def test_measurements_to_frame_in_logged_and_named_units():
    m = Measurements.from_values(
        ["FT-1", "TT-1"],
        [10.0, 400.0],
        [0.05, 0.2],
        quantities=["mass_flow", "temperature"],
        units=["t/h", "degC"],
    )
    si = m.to_frame(units="si")
    assert list(si["unit"]) == ["kg/s", "K"] and si["value"].tolist() == [10.0, 400.0]
    logged = m.to_frame(units="logged").set_index("tag")
    # the tag's logged unit is the default (issue: "the tag's logged unit by default")
    assert m.to_frame().set_index("tag").equals(logged)
    assert logged.loc["FT-1", "unit"] == "t/h"
    assert logged.loc["TT-1", "value"] == pytest.approx(400.0 - 273.15, abs=1e-12)
    assert logged.loc["TT-1", "u"] == pytest.approx(0.2, rel=1e-12)  # interval: no offset
    named = m.to_frame(units={"temperature": "degF"}).set_index("tag")
    back = to_si(named.loc["TT-1", "value"], named.loc["TT-1", "unit"])
    assert back == pytest.approx(400.0, rel=1e-12)


def test_text_reprs_are_a_few_lines(demo):
    for obj in (demo.plant, demo.measurements, demo.reconciliation, demo.performance):
        text = repr(obj)
        assert 3 <= len(text.splitlines()) <= 25, type(obj).__name__
        assert len(text) < 3000, type(obj).__name__
        assert not re.search(r"\d[eE][+-]\d", text), text


def test_html_reprs_have_tables_with_units_and_U95(demo):
    for obj in (demo.plant, demo.measurements, demo.reconciliation, demo.performance):
        html = obj._repr_html_()
        assert "<table>" in html and len(html) < 60_000, type(obj).__name__
        assert not re.search(r">[^<]*\d[eE][+-]\d[^<]*<", html), type(obj).__name__
    rec_html = demo.reconciliation._repr_html_()
    assert "U95 with reconciliation" in rec_html and "U95 without reconciliation" in rec_html
    assert "class=flag" in rec_html  # the dropped feedwater flow
    perf_html = demo.performance._repr_html_()
    assert "kJ/kWh" in perf_html and "MW" in perf_html and "guarantee" in perf_html


def test_reconciliation_to_frame_in_logged_units(demo):
    rec = demo.reconciliation
    si = rec.to_frame(units="si").set_index("tag")
    logged = rec.to_frame(units="logged").set_index("tag")
    assert logged.loc["FT-101", "unit"] == "t/h"
    assert logged.loc["FT-101", "reconciled"] == pytest.approx(
        si.loc["FT-101", "reconciled"] * 3.6, rel=1e-12
    )
    assert logged.loc["TT-101", "unit"] == "degC"
    # a gauge tag: the demo's barometer tag gives the atmospheric pressure
    assert logged.loc["PT-101", "unit"] == "barg"
    atm = float(demo.measurements.value[demo.measurements.index("PT-190")])
    assert logged.loc["PT-101", "measured"] == pytest.approx(
        from_si(si.loc["PT-101", "measured"], "barg", atmospheric_pressure=atm), rel=1e-12
    )


def test_performance_frame_in_engineering_units(demo):
    f = demo.performance.to_frame()
    si = demo.performance.results
    assert f.loc["heat_rate", "unit"] == "kJ/kWh"
    assert f.loc["heat_rate", "value"] == pytest.approx(si.loc["heat_rate", "value"] * 3600)
    assert f.loc["first_law_efficiency", "unit"] == "%"
    assert demo.performance.to_frame("si").equals(si)


def test_plan_repr():
    plant = perftest.load_plant(DATA / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        p = perftest.plan(plant, what_if=False)
    text = repr(p)
    assert text.startswith("UncertaintyPlan:") and "U95 with reconciliation" in text
    assert "U95 without reconciliation" in p._repr_html_()


def test_namespace_exports_the_reconcile_result_and_the_warnings():
    from perftest.balance.plant import PlantReconciliation
    from perftest.errors import ReconciliationWarning, StabilityWarning

    assert perftest.PlantReconciliation is PlantReconciliation
    assert perftest.StabilityWarning is StabilityWarning
    assert perftest.ReconciliationWarning is ReconciliationWarning
    assert perftest.Reconciliation is not PlantReconciliation  # contract: the engine's


def test_window_table_view_and_plain_derivatives():
    t = WindowTable(
        {
            "window": [0, 1],
            "start": pd.to_datetime(["2026-05-14 08:00", "2026-05-14 08:30"], utc=True),
            "end": pd.to_datetime(["2026-05-14 08:30", "2026-05-14 09:00"], utc=True),
            "status": ["ok", "failed"],
            "p_value": [0.4, np.nan],
            "passed": [True, None],
            "suspects": ["", ""],
            "net_power": [3.3e7, np.nan],
            "u_net_power": [4e4, np.nan],
            "heat_rate": [3.19, np.nan],
            "u_heat_rate": [0.01, np.nan],
        }
    )
    html = t._repr_html_()
    assert "ok 1" in html and "failed 1" in html
    assert "net_power [MW]" in html and "heat_rate [kJ/kWh]" in html
    # 3.3e7 W = 33.000 MW, U95 = 1.96 * 0.04 MW = 0.078 MW
    assert "33.000 ± 0.078" in html
    assert type(t[t["status"] == "ok"]) is pd.DataFrame  # selections are plain frames


def test_progress_bar_uses_tqdm_when_asked(capsys):
    from perftest.scale.store import Progress

    meter = Progress(3, enabled=True)
    assert meter._tqdm is not None
    meter.add(3)
    meter.close()
    assert "3/3" in capsys.readouterr().err
    quiet = Progress(3, enabled=False)
    quiet.close()
    assert quiet._tqdm is None and capsys.readouterr().err == ""


def test_campaign_table_of_runs_with_a_result_one_run_lacks():
    """A result computed in the first run only has no mean: its mean cells are
    '–', not an error."""
    from types import SimpleNamespace

    from perftest.display.views import campaign_text

    def perf(names):
        res = pd.DataFrame(
            {"value": [30e6, 31e6], "U95": [0.1e6, 0.1e6], "unit": ["W", "W"]},
            index=["net_power", "corrected_net_power"],
        )
        return SimpleNamespace(results=res.loc[names])

    wins = [
        SimpleNamespace(label="run 1", start=pd.Timestamp("2031-05-04 09:00"),
                        end=pd.Timestamp("2031-05-04 10:00"),
                        performance=perf(["net_power", "corrected_net_power"])),
        SimpleNamespace(label="run 2", start=pd.Timestamp("2031-05-04 10:00"),
                        end=pd.Timestamp("2031-05-04 11:00"), performance=perf(["net_power"])),
    ]  # fmt: skip
    combined = pd.DataFrame({"value": [30e6], "U95": [0.07e6], "unit": ["W"]}, index=["net_power"])
    test = SimpleNamespace(mode="runs", windows=wins, results=combined, level=0.95,
                           repeatability=pd.DataFrame(), guarantees=pd.DataFrame())  # fmt: skip
    text = campaign_text(test)
    row = next(ln for ln in text.splitlines() if ln.startswith("corrected_net_power"))
    assert row.split()[1:] == ["31.00", "–", "–", "–", "MW"]
