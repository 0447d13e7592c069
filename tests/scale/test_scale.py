"""Tests of perftest.scale.many.reconcile_many.

Outside checks used here:

* every row is compared with an independent loop written in the test: windows from
  ``pandas.date_range``, then ``run.window(start, end).average()``,
  ``perftest.reconcile`` and ``perftest.evaluate`` called directly;
* the Dask engine (threads, processes, a distributed client) must return exactly the
  table of the local engine;
* a failing window's reason is compared with the exception the direct call raises.

The test plant is an invented mixing tee of two water streams (mass and energy
balance); its true states are synthesised with CoolProp's IF97 backend and the logs
are the true values plus seeded noise.
"""

from __future__ import annotations

import functools
import sys
import warnings
from pathlib import Path

import CoolProp.CoolProp as CP
import numpy as np
import pandas as pd
import pytest

import perftest
from perftest.errors import (
    DataError,
    InputError,
    PerftestError,
    PropertyRangeError,
    ReconciliationWarning,
)
from perftest.run.core import Run
from perftest.scale.many import KEY_RESULTS, TABLE_COLUMNS, reconcile_many

# These tests were written for the plain path: no serial elimination and no stability
# check unless a test asks for them.  reconcile_many's own defaults are those of
# perftest.defaults, shared with `perftest monitor` (tests/run/test_defaults.py).
reconcile_many = functools.partial(reconcile_many, eliminate=False, stability=False)

IF97 = "IF97::Water"
T0 = pd.Timestamp("2031-03-02 10:00", tz="UTC")
EVERY = pd.Timedelta("15min")

PLANT = """
[site]
name = "Millbrook mixing loop (invented)"
timezone = "UTC"
dead_state_temperature = { value = 15.0, unit = "degC" }

[tags."FT-C"]
unit = "kg/s"
uncertainty = { value = 1.0, kind = "percent_of_reading" }
[tags."FT-H"]
unit = "kg/s"
uncertainty = { value = 1.0, kind = "percent_of_reading" }
[tags."FT-M"]
unit = "kg/s"
uncertainty = { value = 1.0, kind = "percent_of_reading" }
[tags."TT-C"]
unit = "K"
uncertainty = { value = 0.3, kind = "absolute" }
[tags."TT-H"]
unit = "K"
uncertainty = { value = 0.3, kind = "absolute" }
[tags."TT-M"]
unit = "K"
uncertainty = { value = 0.3, kind = "absolute" }
[tags."PT-C"]
unit = "bar"
uncertainty = { value = 0.02, kind = "absolute" }
[tags."PT-H"]
unit = "bar"
uncertainty = { value = 0.02, kind = "absolute" }
[tags."PT-M"]
unit = "bar"
uncertainty = { value = 0.02, kind = "absolute" }

[streams.cold]
fluid = "water"
phase = "liquid"
mass_flow = "FT-C"
pressure = "PT-C"
temperature = "TT-C"

[streams.hot]
fluid = "water"
phase = "liquid"
mass_flow = "FT-H"
pressure = "PT-H"
temperature = "TT-H"

[streams.mixed]
fluid = "water"
phase = "liquid"
mass_flow = "FT-M"
pressure = "PT-M"
temperature = "TT-M"

[units.tee]
type = "mixer"
inlets = ["cold", "hot"]
outlets = ["mixed"]
"""


def truth() -> dict:
    """Consistent true values of the tee [SI]: the mixed enthalpy closes the balance."""
    mc, mh = 20.0, 10.0
    pc, ph, pm = 3.0e5, 3.1e5, 2.9e5
    Tc, Th = 290.0, 350.0
    hc = CP.PropsSI("H", "P", pc, "T", Tc, IF97)
    hh = CP.PropsSI("H", "P", ph, "T", Th, IF97)
    Tm = CP.PropsSI("T", "P", pm, "H", (mc * hc + mh * hh) / (mc + mh), IF97)
    return {
        "FT-C": mc, "FT-H": mh, "FT-M": mc + mh,
        "TT-C": Tc, "TT-H": Th, "TT-M": Tm,
        "PT-C": pc, "PT-H": ph, "PT-M": pm,
    }  # fmt: skip


def logs(n: int = 60, seed: int = 1) -> pd.DataFrame:
    """n one-minute samples from T0: truth plus seeded instrument noise."""
    rng = np.random.default_rng(seed)
    idx = pd.date_range(T0, periods=n, freq="1min")
    cols = {}
    for tag, v in truth().items():
        noise = rng.normal(size=n)
        cols[tag] = v + 0.05 * noise if tag.startswith("TT") else v * (1 + 0.003 * noise)
    return pd.DataFrame(cols, index=idx)


@pytest.fixture(scope="module")
def plant(tmp_path_factory):
    path = Path(tmp_path_factory.mktemp("plant")) / "tee.toml"
    path.write_text(PLANT)
    return perftest.load_plant(path)


@pytest.fixture(scope="module")
def run(plant):
    """One hour, four good 15-minute windows."""
    return Run.from_frame(logs(), plant=plant)


@pytest.fixture(scope="module")
def faulty_run(plant):
    """Window 1: FT-H never valid; window 2: cold stream above saturation;
    window 3: FT-C reads 6 % high; plus a trailing single sample at 11:00."""
    df = logs(61)
    w = [T0 + k * EVERY for k in range(5)]
    df.loc[w[1] : w[2] - pd.Timedelta("1s"), "FT-H"] = np.nan
    # 450 K at 3 bar lies above saturation (about 407 K): not a liquid
    df.loc[w[2] : w[3] - pd.Timedelta("1s"), "TT-C"] = 450.0
    df.loc[w[3] : w[4] - pd.Timedelta("1s"), "FT-C"] *= 1.06
    return Run.from_frame(df, plant=plant)


def direct(plant, run, start, end, **kw):
    """The independent path: window, average, reconcile, called by hand."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = run.window(start, end).average()
        return perftest.reconcile(plant, m, **kw)


def assert_row_matches(row, rec):
    gt = rec.global_test
    # Same arithmetic on the same numbers in the same order: identical results are
    # expected; 1e-12 relative only guards against a different copy of the frame.
    assert row["chi2"] == pytest.approx(gt["chi2"], rel=1e-12)
    assert row["p_value"] == pytest.approx(gt["p_value"], rel=1e-12)
    assert row["dof"] == gt["dof"]
    assert bool(row["passed"]) is gt["passed"]
    frame = rec.to_frame(units="si")
    expected = [str(t) for t in frame.loc[frame["suspect"].astype(bool), "tag"]]
    assert row["suspects"] == ", ".join(expected)
    assert row["n_suspects"] == len(expected)
    assert row["eliminated"] == ", ".join(e.tag for e in rec.eliminated)


# --------------------------------------------------------------------------- rows


def test_rows_equal_an_independent_loop(plant, faulty_run):
    table = reconcile_many(plant, faulty_run, "15min", results=False)
    assert tuple(table.columns[: len(TABLE_COLUMNS)]) == TABLE_COLUMNS
    starts = pd.date_range(T0, faulty_run.data.index[-1], freq=EVERY)
    assert list(table["start"]) == list(starts)
    assert list(table["end"]) == list(starts + EVERY)
    idx = faulty_run.data.index
    for i, start in enumerate(starts):
        row = table.iloc[i]
        assert row["n_samples"] == int(((idx >= start) & (idx < start + EVERY)).sum())
    # windows 0 and 3 reconcile; 3 fails its global test
    for i in (0, 3):
        row = table.iloc[i]
        assert row["status"] == "ok" and row["reason"] == ""
        assert_row_matches(row, direct(plant, faulty_run, starts[i], starts[i] + EVERY))
    assert bool(table.loc[0, "passed"]) and not bool(table.loc[3, "passed"])
    assert "FT-C" in table.loc[3, "suspects"]
    # windows 1 and 2 fail: the row carries the error the direct call raises
    # (window 2: the cold stream reads as steam, refused against its declared phase)
    for i, stage, error in ((1, "average", DataError), (2, "reconcile", PropertyRangeError)):
        with pytest.raises(error) as info:
            direct(plant, faulty_run, starts[i], starts[i] + EVERY)
        row = table.iloc[i]
        assert row["status"] == "failed"
        assert row["reason"] == f"{stage}: {type(info.value).__name__}: {info.value}"
        assert pd.isna(row["chi2"]) and pd.isna(row["passed"])
    # the trailing single sample: reported, not reconciled
    last = table.iloc[4]
    assert last["status"] == "skipped" and last["n_samples"] == 1
    assert "min_samples=8" in last["reason"]  # half of 15 one-minute samples, rounded up


def test_elimination_and_alpha_match_reconcile(plant, faulty_run):
    p0 = direct(plant, faulty_run, T0, T0 + EVERY).global_test["p_value"]
    assert p0 > 0.05  # window 0 holds consistent data
    # an alpha above window 0's p-value makes its global test fail, so the row only
    # matches if alpha reaches the reconciliation
    alpha = (1.0 + p0) / 2.0
    table = reconcile_many(plant, faulty_run, "15min", results=False, eliminate=True, alpha=alpha)
    for i in (0, 3):
        start = T0 + i * EVERY
        rec = direct(plant, faulty_run, start, start + EVERY, eliminate=True, alpha=alpha)
        assert rec.eliminated  # the failing global test triggers elimination
        assert_row_matches(table.iloc[i], rec)


def test_window_warnings_go_to_the_row(plant, faulty_run):
    with warnings.catch_warnings(record=True) as outer:
        warnings.simplefilter("always")
        table = reconcile_many(plant, faulty_run, "15min", results=False)
    assert not [w for w in outer if issubclass(w.category, ReconciliationWarning)]
    assert "ReconciliationWarning: The global test fails" in table.loc[3, "warnings"]
    assert table.loc[0, "warnings"] == ""


def test_explicit_windows_and_several_runs(plant, run, faulty_run):
    pairs = [("2031-03-02 10:05", "2031-03-02 10:25"), ("2031-03-02 10:32", "2031-03-02 10:42")]
    table = reconcile_many(plant, {"a": run, "b": faulty_run}, every=pairs, results=False)
    assert list(table["run"]) == ["a", "a", "b", "b"]
    assert list(table["window"]) == [0, 1, 0, 1]
    for i in (0, 1):
        start, end = (pd.Timestamp(t, tz="UTC") for t in pairs[i])
        assert table.loc[i, "start"] == start and table.loc[i, "end"] == end
        assert_row_matches(table.iloc[i], direct(plant, run, start, end))
    # run b: 10:05-10:25 lacks FT-H from 10:15 on: half its samples, below the minimum
    # coverage (perftest.defaults.MIN_COVERAGE): refused, naming the tag, as by hand
    start, end = (pd.Timestamp(t, tz="UTC") for t in pairs[0])
    assert table.loc[2, "status"] == "failed" and "FT-H (50%)" in table.loc[2, "reason"]
    with pytest.raises(DataError, match=r"FT-H \(50%\) hold less than the minimum coverage"):
        direct(plant, faulty_run, start, end)
    # 10:32-10:42 lies inside the stretch where the cold stream reads as steam
    assert table.loc[3, "status"] == "failed"
    # refused before the solve: the measured state contradicts the declared phase
    assert "DeclaredPhaseError" in table.loc[3, "reason"]
    # a list of runs is labelled by position, the whole run with every=None
    whole = reconcile_many(plant, [run, run], every=None, results=False)
    assert list(whole["run"]) == [0, 1] and list(whole["n_samples"]) == [60, 60]
    assert_row_matches(whole.iloc[1], direct(plant, run, None, None))


def test_windows_follow_the_plant_time_zone(tmp_path):
    # +05:30: whole hours of the plant's clock are not whole hours of UTC
    path = tmp_path / "tee.toml"
    path.write_text(PLANT.replace('timezone = "UTC"', 'timezone = "Asia/Kolkata"'))
    plant = perftest.load_plant(path)
    df = logs(90)
    df.index = pd.date_range("2031-03-02 10:07", periods=90, freq="1min")  # plant clock
    run = Run.from_frame(df.tz_localize("Asia/Kolkata").tz_convert("UTC"), plant=plant)
    table = reconcile_many(plant, run, "1h", results=False)
    local = pd.Timestamp("2031-03-02 10:00", tz="Asia/Kolkata")
    assert list(table["start"]) == [local, local + pd.Timedelta("1h")]
    # naive times are read on the plant's clock, as Run.window reads them
    pair = ("2031-03-02 10:20", "2031-03-02 10:50")
    table = reconcile_many(plant, run, [pair], results=False)
    assert table.loc[0, "start"] == pd.Timestamp(pair[0], tz="Asia/Kolkata")
    assert table.loc[0, "n_samples"] == len(run.window(*pair).data) == 30
    assert_row_matches(table.iloc[0], direct(plant, run, *pair))


def test_results_need_a_performance_table(plant, run):
    # the tee has no [performance] table: True reconciles only, a list is an error
    table = reconcile_many(plant, run, "30min")
    assert (table["status"] == "ok").all()
    assert list(table.columns) == [*TABLE_COLUMNS, "warnings"]
    with pytest.raises(InputError, match=r"no \[performance\] table") as info:
        reconcile_many(plant, run, "30min", results=["heat_rate"])
    assert info.value.parameter == "results"


def test_min_samples(plant, run):
    table = reconcile_many(plant, run, "15min", results=False, min_samples=16)
    assert (table["status"] == "skipped").all()
    assert table["reason"].str.contains("fewer than min_samples=16").all()


def test_on_error_raise(plant, faulty_run):
    with pytest.raises(DataError, match="FT-H"):
        reconcile_many(plant, faulty_run, "15min", results=False, on_error="raise")


# --------------------------------------------------------------------------- engines


def test_dask_equals_local(plant, faulty_run):
    dask = pytest.importorskip("dask")
    local = reconcile_many(plant, faulty_run, "15min", results=False)
    got = reconcile_many(plant, faulty_run, "15min", results=False, engine="dask",
                         scheduler="threads")  # fmt: skip
    pd.testing.assert_frame_equal(got, local, check_exact=True)
    # Dask's processes scheduler: windows and rows cross a process boundary by
    # pickling.  "fork" starts the workers from this already-loaded process (a
    # spawned worker spends ten seconds importing CoolProp and scipy); the pickling
    # is the same either way.
    with dask.config.set({"multiprocessing.context": "fork"}):
        got = reconcile_many(plant, faulty_run, "15min", results=False, engine="dask",
                             scheduler="processes")  # fmt: skip
    pd.testing.assert_frame_equal(got, local, check_exact=True)


def test_dask_default_starts_and_closes_a_local_cluster(plant, run, monkeypatch):
    """No scheduler, none configured, no active client: the job starts its own
    local_cluster and closes it afterwards."""
    distributed = pytest.importorskip("distributed")
    import perftest.scale.many as scale

    original = scale.local_cluster
    started = []

    def spy(*args, **kw):
        # in-process workers keep the test fast; the other settings are its own
        cluster = original(1, processes=False)
        started.append(cluster)
        return cluster

    monkeypatch.setattr(scale, "local_cluster", spy)
    got = reconcile_many(plant, run, "30min", results=False, engine="dask")
    assert len(started) == 1
    assert started[0].status.name == "closed"
    with pytest.raises(ValueError):
        distributed.default_client()  # the job's client is closed too
    pd.testing.assert_frame_equal(got, reconcile_many(plant, run, "30min", results=False))


def test_local_cluster_switches_the_worker_profiler_off():
    distributed = pytest.importorskip("distributed")
    from perftest.scale.many import local_cluster

    def profiling(dask_worker):
        import dask

        return (
            dask.config.get("distributed.worker.profile.enabled"),
            "profile" in dask_worker.periodic_callbacks,
        )

    # one spawned worker process: the setting must reach it through its nanny
    with local_cluster(1) as cluster, distributed.Client(cluster) as client:
        assert list(client.run(profiling).values()) == [(False, False)]
        assert list(client.nthreads().values()) == [1]
    # kept on request (in-process worker: the setting is read in this process)
    with local_cluster(1, profiler=True, processes=False) as cluster, \
            distributed.Client(cluster) as client:  # fmt: skip
        assert list(client.run(profiling).values()) == [(True, True)]


def _sampling(server):
    """Milliseconds between a Dask server's event-loop ticks and system-monitor reads."""
    calls = server.periodic_callbacks
    return calls["tick"].callback_time, calls["monitor"].callback_time


def _worker_sampling(dask_worker):
    return _sampling(dask_worker)


def _scheduler_sampling(dask_scheduler):
    return _sampling(dask_scheduler)


def test_local_cluster_samples_dask_itself_less_often():
    # Dask's defaults (distributed.yaml of distributed 2026.8): tick 20 ms, system monitor
    # 500 ms; perftest's cluster: 1 s and 2 s in the worker processes (through their
    # nannies) and in the scheduler, the memory monitor left at Dask's default.
    distributed = pytest.importorskip("distributed")
    import dask

    from perftest.scale.cluster import QUIET_SETTINGS
    from perftest.scale.many import local_cluster

    assert QUIET_SETTINGS == {
        "distributed.admin.tick.interval": "1s",
        "distributed.admin.system-monitor.interval": "2s",
    }
    own = dask.config.get("distributed.admin.tick.interval")
    with local_cluster(1) as cluster, distributed.Client(cluster) as client:
        assert list(client.run(_worker_sampling).values()) == [(1000, 2000)]
        assert client.run_on_scheduler(_scheduler_sampling) == (1000, 2000)
        key = "distributed.worker.memory.monitor-interval"
        memory = client.run(lambda: dask.config.get(key))
        assert list(memory.values()) == [dask.config.get(key)]
    # this process's own configuration is left as it was
    assert dask.config.get("distributed.admin.tick.interval") == own


def test_dask_settings_become_the_environment_variables_dask_reads():
    # Dask's rule for environment variables (dask.config.collect_env, which reads them):
    # DASK_ prefix, "__" between nested keys, case and "-"/"_" ignored.
    dask = pytest.importorskip("dask")
    from perftest.scale.cluster import QUIET_SETTINGS, environment

    env = environment({**QUIET_SETTINGS, "distributed.worker.profile.enabled": False})
    assert env == {
        "DASK_DISTRIBUTED__ADMIN__TICK__INTERVAL": "1s",
        "DASK_DISTRIBUTED__ADMIN__SYSTEM_MONITOR__INTERVAL": "2s",
        "DASK_DISTRIBUTED__WORKER__PROFILE__ENABLED": "False",
    }
    read = dask.config.collect_env(env)
    assert read["distributed"]["admin"]["tick"]["interval"] == "1s"
    assert read["distributed"]["admin"]["system_monitor"]["interval"] == "2s"
    assert read["distributed"]["worker"]["profile"]["enabled"] is False


@pytest.mark.parametrize("n", [0, -2, 1.5, "2", True])
def test_local_cluster_refuses_a_bad_worker_count(n):
    pytest.importorskip("distributed")
    from perftest.scale.many import local_cluster

    with pytest.raises(InputError, match="'n_workers' parameter of local_cluster"):
        local_cluster(n)


def test_dask_follows_its_configured_scheduler(plant, run):
    dask = pytest.importorskip("dask")
    from perftest.scale.many import _resolve_scheduler

    with dask.config.set(scheduler="sync"):
        assert _resolve_scheduler(dask, None) is None  # left to Dask's configuration
        got = reconcile_many(plant, run, "30min", results=False, engine="dask")
    assert _resolve_scheduler(dask, "threads") == "threads"
    pd.testing.assert_frame_equal(got, reconcile_many(plant, run, "30min", results=False))


def test_dask_distributed_client_equals_local(plant, run):
    distributed = pytest.importorskip("distributed")
    local = reconcile_many(plant, run, "30min", results=False)
    # in-process workers: tests the Client path without starting processes
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2) as client:
        got = reconcile_many(plant, run, "30min", results=False, engine="dask",
                             scheduler=client)  # fmt: skip
    pd.testing.assert_frame_equal(got, local, check_exact=True)


def test_dask_scheduler_address_equals_local(plant, run):
    distributed = pytest.importorskip("distributed")
    local = reconcile_many(plant, run, "30min", results=False)
    # port 0: the system picks a free port; in-process workers, no dashboard
    with distributed.LocalCluster(
        processes=False, n_workers=1, threads_per_worker=1, scheduler_port=0,
        dashboard_address=None,
    ) as cluster:  # fmt: skip
        got = reconcile_many(plant, run, "30min", results=False, engine="dask",
                             scheduler=cluster.scheduler_address)  # fmt: skip
    pd.testing.assert_frame_equal(got, local, check_exact=True)


def test_dask_missing_says_how_to_install(plant, run, monkeypatch):
    monkeypatch.setitem(sys.modules, "dask", None)  # makes "import dask" fail
    with pytest.raises(InputError, match=r'pip install "perftest\[scale\]"') as info:
        reconcile_many(plant, run, engine="dask")
    assert info.value.parameter == "engine"


# --------------------------------------------------------------------------- bad input


@pytest.mark.parametrize(
    ("kwargs", "parameter", "match"),
    [
        (dict(engine="spark"), "engine", r"one of \['local', 'dask'\]. Got 'spark'"),
        (dict(every="fortnightly"), "every", "must be a duration such as '15min'"),
        (dict(every="1M"), "every", "must be a duration"),
        (dict(every=15), "every", "must be a duration"),
        (dict(every="-5min"), "every", "positive duration"),
        (dict(every="30s"), "every", "shorter than the run's sampling interval of 0 days 00:01"),
        (dict(every=[]), "every", "holds no window"),
        (dict(every=[("2031-03-02 10:20", "2031-03-02 10:10")]), "every", "must end after"),
        (dict(every=[("2031-03-02 10:00", "2031-03-02 10:00:30")]), "every", "shorter than"),
        (dict(every=["2031-03-02 10:00"]), "every", "pairs"),
        (dict(min_samples=0), "min_samples", ">= 1"),
        (dict(min_samples=2.5), "min_samples", "whole number"),
        (dict(alpha=1.5), "alpha", "between 0 and 1"),
        (dict(results=["efficiency_of_everything"]), "results", "unknown results"),
        (dict(scheduler="threads"), "scheduler", "only used with engine='dask'"),
        (dict(engine="dask", scheduler="gpu"), "scheduler", "'processes'"),
        (dict(on_error="ignore"), "on_error", "'row' or 'raise'"),
    ],
)
def test_bad_input(plant, run, kwargs, parameter, match):
    with pytest.raises(InputError, match=match) as info:
        reconcile_many(plant, run, **kwargs)
    assert info.value.parameter == parameter
    assert isinstance(info.value, PerftestError) and isinstance(info.value, ValueError)


@pytest.mark.parametrize("bad", [[], [3], {"a": 3}, 2.5])
def test_bad_run(plant, bad):
    with pytest.raises(InputError, match="'run' parameter of reconcile_many") as info:
        reconcile_many(plant, bad)
    assert info.value.parameter == "run"


def test_missing_run_file_is_named(plant, tmp_path):
    with pytest.raises(DataError, match="nowhere.csv: run file not found"):
        reconcile_many(plant, tmp_path / "nowhere.csv")


# --------------------------------------------------------------------------- demo plant

DEMO = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"


@pytest.mark.slow
def test_demo_results_equal_evaluate():
    """Key results and their u per window equal perftest.evaluate called by hand."""
    plant = perftest.load_plant(DEMO / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        demo = perftest.read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant)
    pairs = [("2026-05-14 10:00", "2026-05-14 10:15"), ("2026-05-14 11:00", "2026-05-14 11:15")]
    table = reconcile_many(plant, demo, every=pairs, eliminate=True)
    for i, (a, b) in enumerate(pairs):
        rec = direct(plant, demo, a, b, eliminate=True)
        row = table.iloc[i]
        assert row["status"] == "ok", row["reason"]
        assert_row_matches(row, rec)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            perf = perftest.evaluate(plant, rec, monte_carlo=False)
        names = [*KEY_RESULTS, *(n for n in perf.results.index if n.startswith("corrected_"))]
        assert any(n.startswith("corrected_") for n in names)  # the demo has corrections
        for name in names:
            # the row's window was warm-started from its neighbour: 1e-9 relative,
            # see test_warm_start_gives_the_cold_solution
            assert row[name] == pytest.approx(perf.value(name), rel=1e-9), name
            assert row[f"u_{name}"] == pytest.approx(perf.uncertainty(name), rel=1e-9), name


@pytest.fixture(scope="module")
def demo():
    plant = perftest.load_plant(DEMO / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant)
    return plant, run


def test_demo_every_window_equals_a_single_call(demo):
    """All 16 windows of the demo run, warm-started one from the other, against
    perftest.reconcile + perftest.evaluate called on each window alone (cold start).

    Tolerance 1e-9 relative: see test_warm_start_gives_the_cold_solution.
    """
    plant, run = demo
    table = reconcile_many(plant, run, "15min", eliminate=True)
    # 08:00 to 12:00, and the aligned stamp 12:00 alone in a 17th window (skipped)
    assert len(table) == 17 and (table["status"].iloc[:16] == "ok").all(), table["reason"]
    assert table["status"].iloc[16] == "skipped"
    for i in range(16):
        row = table.iloc[i]
        rec = direct(plant, run, row["start"], row["end"], eliminate=True)
        assert row["suspects"] == ", ".join(
            t
            for t, s in zip(
                rec.to_frame(units="si")["tag"], rec.to_frame(units="si")["suspect"], strict=True
            )
            if s
        )
        assert row["chi2"] == pytest.approx(rec.global_test["chi2"], rel=1e-9)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            perf = perftest.evaluate(plant, rec, monte_carlo=False)
        for name in ("first_law_efficiency", "heat_rate", "carnot_efficiency"):
            assert row[name] == pytest.approx(perf.value(name), rel=1e-9)
            assert row[f"u_{name}"] == pytest.approx(perf.uncertainty(name), rel=1e-9)


def test_demo_dask_cluster_equals_local(demo, tmp_path):
    """Dask's distributed scheduler (in-process workers, no port for a dashboard)
    gives exactly the local table, from the run in memory and from the run files."""
    distributed = pytest.importorskip("distributed")
    plant, run = demo
    kw = dict(every="15min", eliminate=True, chunk="1h")
    local = reconcile_many(plant, run, **kw)
    files = [str(DEMO / "historian.csv"), str(DEMO / "logger.csv")]
    local_files = reconcile_many(plant, files, **kw)
    with distributed.Client(
        processes=False, n_workers=2, threads_per_worker=1, dashboard_address=None
    ) as client:
        got = reconcile_many(plant, run, engine="dask", scheduler=client, **kw)
        got_files = reconcile_many(plant, files, engine="dask", scheduler=client, **kw)
    pd.testing.assert_frame_equal(got, local, check_exact=True)
    pd.testing.assert_frame_equal(got_files, local_files, check_exact=True)
    # files read a day at a time against the run read whole: the same windows and
    # results (the alignment rounds the last stamp up: one more, skipped window)
    n = len(local)
    assert local_files["status"].iloc[n:].eq("skipped").all()
    np.testing.assert_allclose(
        local_files["first_law_efficiency"].iloc[:n], local["first_law_efficiency"], rtol=1e-9
    )


# --------------------------------------------------------------------------- warm start


def test_warm_start_gives_the_cold_solution(plant, faulty_run):
    """A warm-started row equals the row computed from the usual initial guess.

    Tolerance: the solver stops once its last step is below 1e-8 standard
    uncertainties and then takes the final Newton step, so two starts end within
    round-off of each other on x and chi2; the covariance is linearised at the last
    iterate, which may differ by that step, hence 1e-9 relative on every number.
    """
    warm = reconcile_many(plant, faulty_run, "15min", results=False, chunk="1D")
    cold = reconcile_many(plant, faulty_run, "15min", results=False, warm_start=False)
    for col in ("chi2", "p_value"):
        np.testing.assert_allclose(warm[col], cold[col], rtol=1e-9, equal_nan=True)
    for col in ("status", "reason", "suspects", "dof", "passed"):
        assert list(warm[col].astype(str)) == list(cold[col].astype(str)), col


def test_reconcile_start_keyword(plant, run):
    m = run.window(T0, T0 + EVERY).average()
    n = run.window(T0 + EVERY, T0 + 2 * EVERY).average()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        first = perftest.reconcile(plant, m)
        cold = perftest.reconcile(plant, n)
        warm = perftest.reconcile(plant, n, start=first)
        # a start that is not a valid state is dropped: the cold path decides
        bad = perftest.reconcile(plant, n, start={"mixed.enthalpy": -1e9})
    for rec in (warm, bad):
        np.testing.assert_allclose(rec.result.x, cold.result.x, rtol=1e-9)  # see above
        assert rec.global_test["chi2"] == pytest.approx(cold.global_test["chi2"], rel=1e-9)
    with pytest.raises(InputError, match="'start' parameter of reconcile") as info:
        perftest.reconcile(plant, n, start=[1.0, 2.0])
    assert info.value.parameter == "start"


# --------------------------------------------------------------------------- files


def _write_csv(frame, path):
    """A run file in the plant file's units (bar for the PT tags), no units row."""
    out = frame.copy()
    for tag in [c for c in out.columns if c.startswith("PT")]:
        out[tag] = out[tag] / 1e5
    out.index = out.index.tz_convert("UTC").tz_localize(None)
    out.index.name = "time"
    out.to_csv(path, float_format="%.6f")


def _file_and_whole(plant, path, minutes, seed):
    """A run file of ``minutes`` one-minute rows from 2031-03-01 and the run read whole."""
    df = logs(minutes, seed=seed)
    df.index = pd.date_range("2031-03-01 00:00", periods=len(df), freq="1min", tz="UTC")
    _write_csv(df, path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return perftest.read_run(path, plant)


def _same_windows(got, expected):
    cols = ["start", "end", "n_samples", "status", "dof", "passed", "suspects"]
    pd.testing.assert_frame_equal(got[cols], expected[cols])
    # same data and arithmetic: only the order of summation may differ
    np.testing.assert_allclose(got["chi2"], expected["chi2"], rtol=1e-9)


def test_run_files_read_a_day_at_a_time(plant, tmp_path):
    """Three days in one file: same rows as the run read whole (outside check:
    perftest.read_run of the whole file, then reconcile_many in memory)."""
    path = tmp_path / "three_days.csv"
    whole = _file_and_whole(plant, path, 3 * 1440 - 30, 4)  # ends 00:30 before midnight
    kw = dict(every="6h", results=False, warm_start=False)
    expected = reconcile_many(plant, whole, **kw)
    got = reconcile_many(plant, path, **kw)
    assert len(got) == 12 and (got["status"] == "ok").all()
    _same_windows(got, expected)


def test_run_files_with_windows_longer_than_a_day(plant, tmp_path):
    """Windows of two days (and explicit ones across three midnights) from a file
    read a day at a time: a chunk's piece then spans the days its windows need.
    Outside check as above: the run read whole, then reconcile_many in memory."""
    path = tmp_path / "five_days.csv"
    whole = _file_and_whole(plant, path, 5 * 1440, 6)
    t = pd.Timestamp("2031-03-01 12:00", tz="UTC")
    for every in (
        "2D",
        [(t, t + pd.Timedelta("3D")), (t + pd.Timedelta("1D"), t + pd.Timedelta("2D"))],
    ):
        kw = dict(every=every, results=False, warm_start=False)
        expected = reconcile_many(plant, whole, **kw)
        got = reconcile_many(plant, path, **kw)
        # the last "2D" window holds one day of data: below the minimum coverage
        partial = got["reason"].str.startswith("coverage 50%")
        assert (got["status"][~partial] == "ok").all() and (
            got["status"][partial] == "skipped"
        ).all()
        assert partial.sum() == (1 if isinstance(every, str) else 0)
        assert got["n_samples"].max() >= 2 * 1440  # windows of two days or more, whole
        _same_windows(got, expected)


def test_bad_line_in_a_later_day_names_the_original_line(plant, tmp_path):
    df = logs(2 * 1440, seed=5)
    df.index = pd.date_range("2031-03-01 00:00", periods=len(df), freq="1min", tz="UTC")
    path = tmp_path / "two_days.csv"
    _write_csv(df, path)
    lines = path.read_text().splitlines(keepends=True)
    bad = 1 + 1440 + 100  # header line, the first day, then 100 lines into the second
    lines[bad - 1] = lines[bad - 1].replace("2031-03-02 01:39", "2031-03-02 01:3x", 1)
    path.write_text("".join(lines))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(DataError) as direct_info:
            perftest.read_run(path, plant)
        with pytest.raises(DataError) as info:
            reconcile_many(plant, path, every="6h", results=False)
    assert f"line {bad}" in str(direct_info.value)  # the importer's own message
    assert f"line {bad}" in str(info.value) and "perftest-piece" not in str(info.value)


# --------------------------------------------------------------------------- store


def test_interrupted_job_resumes_to_the_same_table(plant, faulty_run, tmp_path):
    kw = dict(every="15min", results=False, chunk="30min")
    full = reconcile_many(plant, faulty_run, **kw)
    store = tmp_path / "windows.parquet"
    seen = []

    def stop_after_three(row):
        seen.append(row["window"])
        if len(seen) == 3:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        reconcile_many(plant, faulty_run, store=store, on_window=stop_after_three, **kw)
    assert len(list(store.glob("part-*.parquet"))) == 2  # chunks 10:00 and 10:30
    computed = []
    resumed = reconcile_many(plant, faulty_run, store=store, on_window=computed.append, **kw)
    pd.testing.assert_frame_equal(resumed, full, check_exact=True)
    assert [r["window"] for r in computed] == [4]  # only the chunk not yet written
    # the folder is now one Parquet dataset of exactly these rows
    back = pd.read_parquet(store).sort_values("window", ignore_index=True)
    assert list(back["window"]) == list(full["window"])
    # a changed option does not reuse the stored rows
    again = []
    reconcile_many(plant, faulty_run, store=store, on_window=again.append, alpha=0.01, **kw)
    assert len(again) == len(full)
    # nor does a changed input: only the chunk whose samples changed is redone
    changed = faulty_run.data.copy()
    changed.iloc[-1, 0] *= 1.001
    run2 = Run.from_frame(changed, plant=plant)
    redo = []
    reconcile_many(plant, run2, store=store, on_window=redo.append, alpha=0.01, **kw)
    assert [r["window"] for r in redo] == [4]


def _hold_store_lock(folder, job):
    """A separate process holding the folder's lock, as a running job does."""
    import os
    import subprocess

    code = (
        "import sys, time; from perftest.scale.store import StoreLock; "
        "lock = StoreLock(sys.argv[1], job=sys.argv[2]).acquire(); "
        "print('held', flush=True); time.sleep(120)"
    )
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", PYTHONDONTWRITEBYTECODE="1")
    proc = subprocess.Popen([sys.executable, "-c", code, str(folder), job],
                            stdout=subprocess.PIPE, text=True, env=env)  # fmt: skip
    line = proc.stdout.readline().strip()
    if line != "held":  # the holder failed: do not leave it behind
        proc.kill()
        proc.wait()
        proc.stdout.close()  # the pipe too: no ResourceWarning later
        pytest.fail(f"the lock holder did not start (said {line!r})")
    return proc


def test_store_locked_by_another_process_is_refused(plant, run, tmp_path):
    store = tmp_path / "windows.parquet"
    holder = _hold_store_lock(store, "perftest monitor")
    try:
        with pytest.raises(PerftestError, match="in use by perftest monitor") as info:
            reconcile_many(plant, run, store=store, results=False)
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()  # the pipe too: no ResourceWarning later
    assert f"process {holder.pid} on host" in str(info.value)
    assert not list(store.glob("part-*.parquet"))  # nothing written beside the holder
    # the operating system drops the lock with its process: the next job runs
    table = reconcile_many(plant, run, store=store, results=False)
    assert len(list(store.glob("part-*.parquet"))) >= 1 and len(table) == 4


def test_two_python_jobs_on_one_store(plant, run, tmp_path):
    # a second job while the first is inside its loop (another thread of the same
    # process: its own open file, so the operating-system lock refuses it too)
    import threading

    store = tmp_path / "windows.parquet"
    inside, go_on = threading.Event(), threading.Event()
    errors = []

    def pause(row):
        inside.set()
        go_on.wait(60)

    def first():
        try:
            reconcile_many(plant, run, store=store, results=False, on_window=pause)
        except BaseException as exc:  # noqa: BLE001 - reported to the test below
            errors.append(exc)

    t = threading.Thread(target=first)
    t.start()
    try:
        assert inside.wait(60)
        with pytest.raises(PerftestError, match="in use by reconcile_many"):
            reconcile_many(plant, run, store=store, results=False)
    finally:
        go_on.set()
        t.join(120)
    assert not errors
    assert sorted(pd.read_parquet(store)["window"]) == [0, 1, 2, 3]


def test_store_that_is_a_file_is_refused(plant, run, tmp_path):
    path = tmp_path / "windows.parquet"
    path.write_text("not a folder")
    with pytest.raises(PerftestError, match="this is a file"):
        reconcile_many(plant, run, store=path, results=False)
    assert path.read_text() == "not a folder"


def test_store_refuses_a_foreign_folder(plant, run, tmp_path):
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(InputError, match="notes.txt") as info:
        reconcile_many(plant, run, store=tmp_path, results=False)
    assert info.value.parameter == "store"


def test_progress_line(plant, run):
    import io

    stream = io.StringIO()
    from perftest.scale.store import Progress

    meter = Progress(4, enabled=True, stream=stream, every=0.0)
    meter.add(2)
    meter.add(2, failed=1)
    meter.close()
    lines = stream.getvalue().splitlines()
    assert lines[0].startswith("windows 2/4 (50 %)")
    assert "4/4 (100 %)" in lines[-1] and "1 failed" in lines[-1]
    silent = io.StringIO()  # not a terminal: silent unless asked
    Progress(4, stream=silent).close()
    assert silent.getvalue() == ""


def test_stability_keeps_unstable_windows(plant, faulty_run):
    df = faulty_run.data.copy()
    # a 5 K ramp of the hot stream over the first window: beyond the default limit
    n = 15
    df.iloc[:n, list(df.columns).index("TT-H")] += np.linspace(0.0, 5.0, n)
    ramp = Run.from_frame(df, plant=plant)
    table = reconcile_many(plant, ramp, "15min", results=False, stability=True)
    st = ramp.window(T0, T0 + EVERY).stability(warn=False)
    assert not bool(st.loc["TT-H", "passed"])  # Run.stability, called directly, agrees
    row = table.iloc[0]
    assert row["status"] == "unstable" and row["unstable"] == "TT-H"
    assert "stability: TT-H" in row["reason"] and not row["stable"]
    assert not pd.isna(row["chi2"])  # still reconciled, kept with its reason
    assert bool(table.loc[3, "stable"]) or table.loc[3, "status"] != "ok"


def test_local_cluster_says_nothing_of_a_busy_dashboard_port():
    # perftest's cluster has no dashboard; a program holding Dask's default port
    # 8787 must not make `perftest monitor --engine dask` print Dask's port note
    # (it broke the one-line promise of the command line).
    import socket
    import warnings

    pytest.importorskip("distributed")
    from perftest.scale import local_cluster

    holder = socket.socket()
    try:
        holder.bind(("127.0.0.1", 8787))
        holder.listen()
    except OSError:
        pass  # already held by another program: the condition under test
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            cluster = local_cluster(1)
            cluster.close()
    finally:
        holder.close()
    assert not [w for w in caught if "already in use" in str(w.message)]
