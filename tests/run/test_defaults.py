"""One set of defaults: the Python path of the README and the command line agree."""

from __future__ import annotations

import inspect
import json
import warnings

import pytest

import perftest
from perftest import cli, defaults, demo
from perftest.run.core import Run
from perftest.scale.many import reconcile_many
from perftest.scale.monitor import monitor


def test_defaults_are_the_same_object_everywhere():
    # the outlier level of Run.screen_outliers, of the demo and of `perftest report`
    sig = inspect.signature(Run.screen_outliers).parameters
    assert sig["alpha"].default == defaults.OUTLIER_ALPHA
    assert demo.DEFAULT_OUTLIER_ALPHA == defaults.OUTLIER_ALPHA
    args = cli.build_parser().parse_args(["report", "p.toml", "--data", "r.csv"])
    assert args.outlier_alpha == defaults.OUTLIER_ALPHA
    # no --window and no --start/--end: the steadiest window of the default length
    assert cli._window_options(args)[2] == defaults.STEADY_WINDOW
    assert (not args.keep_all) == defaults.ELIMINATE
    # elimination and stability checks: reconcile_many as `perftest monitor`
    many = inspect.signature(reconcile_many).parameters
    mon = inspect.signature(monitor).parameters
    for name in ("eliminate", "stability"):
        assert many[name].default == mon[name].default, name
    assert many["eliminate"].default == defaults.ELIMINATE
    assert many["stability"].default == defaults.CHECK_STABILITY
    assert many["alpha"].default == defaults.RECONCILIATION_ALPHA


def test_readme_python_path_and_perftest_report_give_the_same_numbers(tmp_path):
    # The README's code (Usage section) against `perftest report` on the demo data,
    # both with their defaults.  Same code path, same order of arithmetic: equal to
    # 1e-12 relative (the JSON round trip of a float is exact).
    data = demo.data_dir()
    plant_path = data / "plant.toml"
    files = [str(data / f) for f in demo.DEMO_FILES]
    out = tmp_path / "summary.json"
    status = cli.main(
        ["report", str(plant_path), *sum((["--data", f] for f in files), []), "--json", str(out)]
    )
    assert status == 0
    summary = json.loads(out.read_text())

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plant = perftest.load_plant(plant_path)
        run = perftest.read_run(files, plant)
        steady = run.steadiest_window("2h")
        measurements = steady.screen_outliers().average()
        rec = perftest.reconcile(plant, measurements, eliminate=True)
        perf = perftest.evaluate(plant, rec)

    assert summary["global_test"]["chi2"] == pytest.approx(rec.global_test["chi2"], rel=1e-12)
    rows = {m["tag"]: m for m in summary["measurements"]}
    for tag in measurements.tags:
        if tag in rows and rows[tag]["measured"] is not None:
            assert rows[tag]["measured"] == pytest.approx(measurements[tag].value, rel=1e-12)
    for name in ("first_law_efficiency", "heat_rate", "net_power", "carnot_efficiency"):
        value = float(perf.results.loc[name, "value"])
        assert summary["results"][name]["value"] == pytest.approx(value, rel=1e-12)
