"""Tests of ``perftest monitor`` and the trend figure (perftest.scale.monitor, report.trend).

Outside checks: the command's table is compared with ``perftest.reconcile_many``
called directly on the run read whole by ``perftest.read_run`` (an independent
path: in memory, no store, no day-by-day reading); the summary counts with pandas
counts of that table; the figure's artists with matplotlib's own objects.
"""

from __future__ import annotations

import json
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import perftest
from perftest.cli import main
from perftest.report.trend import trend_figure

DEMO = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"
FILES = [DEMO / "historian.csv", DEMO / "logger.csv"]


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory):
    out = tmp_path_factory.mktemp("monitor")
    argv = ["monitor", str(DEMO / "plant.toml"), "--data", str(FILES[0]), "--data",
            str(FILES[1]), "--every", "30min", "--out", str(out), "-q"]  # fmt: skip
    assert main(argv) == 0
    return out


@pytest.fixture(scope="module")
def direct():
    plant = perftest.load_plant(DEMO / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run(FILES, plant)
    return perftest.reconcile_many(plant, run, "30min", eliminate=True, stability=True)


def test_monitor_writes_the_table(demo_out, direct):
    table = pd.read_csv(demo_out / "windows.csv")
    # four hours in 30-minute windows, and the aligned stamp 12:00 (the logger's
    # last samples belong to it, read_run's alignment rule) in a ninth, skipped
    assert len(table) == len(direct) == 9
    assert direct["status"].iloc[-1] == "skipped"
    assert list(table["status"]) == list(direct["status"])
    assert list(table["suspects"].fillna("")) == list(direct["suspects"])
    # the CSV prints floats with repr precision: equal to the last digit; the two
    # paths differ only in the warm start (1e-9, see tests/test_scale.py)
    for col in ("chi2", "first_law_efficiency", "u_first_law_efficiency", "carnot_efficiency"):
        np.testing.assert_allclose(table[col], direct[col], rtol=1e-9)
    stored = pd.read_parquet(demo_out / "windows.parquet")
    assert sorted(stored["window"]) == list(range(9))


def test_monitor_summary(demo_out, direct):
    info = json.loads((demo_out / "monitor.json").read_text())
    counts = direct["status"].value_counts()
    for status in ("ok", "unstable", "skipped", "failed"):
        assert info["windows"][status] == int(counts.get(status, 0))
    assert info["windows"]["total"] == len(direct)
    # FT-171 reads 3 % high in the demo (sample_data/brackenfold/generate.py)
    n = int(direct["suspects"].str.contains("FT-171").sum())
    assert n > 0 and info["suspect_windows_by_tag"]["FT-171"] == n
    assert "do not replace" in info["caution"]
    assert (demo_out / "trend.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_monitor_resumes(demo_out, capsys):
    # the part files (the store's lock file, .perftest.lock, names each job that holds it)
    before = {p.name: p.stat().st_mtime_ns for p in (demo_out / "windows.parquet").glob("part-*")}
    argv = ["monitor", str(DEMO / "plant.toml"), "--data", str(FILES[0]), "--data",
            str(FILES[1]), "--every", "30min", "--out", str(demo_out), "-q",
            "--no-figures"]  # fmt: skip
    assert main(argv) == 0
    after = {p.name: p.stat().st_mtime_ns for p in (demo_out / "windows.parquet").glob("part-*")}
    assert before
    assert after == before  # nothing recomputed, nothing rewritten


@pytest.mark.parametrize(
    ("extra", "match"),
    [
        (["--data", "missing.csv"], "missing.csv: run file not found"),
        (["--every", "fortnightly"], "argument --every: must be a duration such as '2h'"),
        (["--workers", "0"], "--workers must be at least 1"),
        (["--scheduler", "tcp://127.0.0.1:1"], "--scheduler is used with --engine dask"),
    ],
)
def test_monitor_bad_input_one_line(tmp_path, capsys, extra, match):
    argv = ["monitor", str(DEMO / "plant.toml"), "--data", str(FILES[0]), "--data",
            str(FILES[1]), "--out", str(tmp_path / "o"), "-q", *extra]  # fmt: skip
    try:
        code = main(argv)
    except SystemExit as exc:  # argparse's own refusals
        code = exc.code
    assert code == 2
    err = capsys.readouterr().err
    assert err.startswith("perftest: error:") and match in err
    assert err.count("\n") == 1


def test_monitor_as_a_subprocess(tmp_path):
    out = tmp_path / "o"
    proc = subprocess.run(
        [sys.executable, "-m", "perftest.cli", "monitor", str(DEMO / "plant.toml"), "--data",
         str(FILES[0]), "--data", str(FILES[1]), "--every", "1h", "--out", str(out),
         "--no-figures", "-q"],
        capture_output=True, text=True, timeout=120,
    )  # fmt: skip
    assert proc.returncode == 0, proc.stderr
    assert "5 of 1h" in proc.stdout  # 08:00 to 12:00, plus the aligned stamp 12:00
    assert json.loads((out / "monitor.json").read_text())["windows"]["total"] == 5
    # every file it wrote is listed (the store folder with its count of part files)
    wrote = [ln.split("wrote", 1)[1].strip() for ln in proc.stdout.splitlines() if "wrote" in ln]
    outputs = sorted(p for p in out.iterdir() if not p.name.startswith("."))
    assert [str(p) for p in outputs if p.suffix != ".parquet"] == sorted(
        w for w in wrote if "windows.parquet" not in w
    )
    parts = len(list((out / "windows.parquet").glob("part-*.parquet")))
    assert f"{out / 'windows.parquet'} ({parts} part file(s))" in wrote


def test_trend_figure_artists(direct):
    from perftest.evaluation.plant_keys import KEY_RESULTS

    table = direct.copy()
    table.loc[2, "passed"] = False  # one global-test failure to mark
    table.loc[5, ["first_law_efficiency", "u_first_law_efficiency"]] = np.nan  # no result
    fig = trend_figure(table, title="demo", kind="power")
    *panels, axs = fig.axes
    # one panel per headline result of a power plant, in the order of KEY_RESULTS
    assert len(panels) == len(KEY_RESULTS["power"])
    ax = panels[KEY_RESULTS["power"].index("first_law_efficiency")]
    axc = panels[KEY_RESULTS["power"].index("carnot_efficiency")]
    assert "[%]" in ax.get_ylabel() and "[%]" in axc.get_ylabel()
    assert "first-law efficiency" in ax.get_ylabel()
    assert "heat rate [kJ/kWh]" in panels[KEY_RESULTS["power"].index("heat_rate")].get_ylabel()
    assert "mid-time" in axs.get_xlabel()
    labels = ax.get_legend_handles_labels()[1]
    assert "global test failed" in labels and any(lab.startswith("U95 band") for lab in labels)
    # the band spans eta +- 1.96 u (the normal 95 % factor used for every U95), in percent
    band = ax.collections[0].get_paths()[0].vertices[:, 1]
    eta = 100 * direct["first_law_efficiency"].to_numpy()
    u = 100 * direct["u_first_law_efficiency"].to_numpy()
    assert band.max() == pytest.approx(
        np.nanmax(np.delete(eta + 1.959963984540054 * u, 5)), rel=1e-12
    )
    assert [t.get_text() for t in axs.get_yticklabels()] == ["FT-171"]
    fig.canvas.draw()  # lays out without error


def test_trend_figure_needs_results(direct):
    with pytest.raises(perftest.InputError, match="lacks columns"):
        trend_figure(direct.drop(columns=["carnot_efficiency"]), results=["carnot_efficiency"])
    heads = [c for c in direct.columns if not c.startswith("u_")]
    with pytest.raises(perftest.InputError, match="headline result"):
        trend_figure(
            direct[[c for c in heads if c in ("start", "end", "status", "passed", "suspects")]]
        )


def test_monitor_refused_while_a_python_job_holds_its_store(tmp_path, capsys):
    # reconcile_many(store=OUT/windows.parquet) from Python, running in another process
    import os

    out = tmp_path / "o"
    store = out / "windows.parquet"
    code = (
        "import sys, time; from perftest.scale.store import StoreLock; "
        "lock = StoreLock(sys.argv[1], job='reconcile_many').acquire(); "
        "print('held', flush=True); time.sleep(120)"
    )
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", PYTHONDONTWRITEBYTECODE="1")
    holder = subprocess.Popen([sys.executable, "-c", code, str(store)], stdout=subprocess.PIPE,
                              text=True, env=env)  # fmt: skip
    try:
        assert holder.stdout.readline().strip() == "held"
        argv = ["monitor", str(DEMO / "plant.toml"), "--data", str(FILES[0]), "--data",
                str(FILES[1]), "--every", "2h", "--out", str(out), "-q",
                "--no-figures"]  # fmt: skip
        assert main(argv) == 2
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()  # the pipe too: no ResourceWarning later
    line = capsys.readouterr().err.strip()
    assert line.startswith("perftest: error:") and "in use by reconcile_many" in line
    assert f"process {holder.pid} on host" in line
    assert not (out / "windows.csv").exists()
    assert not list(store.glob("part-*.parquet"))
