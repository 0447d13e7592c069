"""The end-to-end path from files to reports, and the bundled demo scenario.

:func:`run_pipeline` runs every stage (load plant, read run files, choose the
window, screen outliers, average, reconcile with serial elimination, evaluate,
write reports), timing each one.  :func:`run_demo` runs it on one of the bundled
scenarios (:data:`SCENARIOS`), each an invented plant with a deterministic
generator, true values and a README in ``sample_data/<name>``:

* ``brackenfold`` (the default): a 36 MW gas-fired condensing steam unit, kind power;
* ``ostrenby``: a 1.1 MW water-cooled R134a chiller tested at 100, 75 and 50 % load,
  kind refrigeration (the demo evaluates the full-load hour);
* ``wrenhollow``: a 15 MW extraction-condensing CHP unit exporting process steam
  with part of the condensate returned, kind chp.

A stage whose module is not part of this installation is skipped and named in
``Outcome.missing``; the stages after it that need its output are skipped too.
Errors in the data or the plant file are raised as :class:`PerftestError`.
"""

from __future__ import annotations

import importlib.util
import os
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from perftest import defaults
from perftest.errors import InputError, PerftestError

__all__ = [
    "Outcome",
    "Scenario",
    "SCENARIOS",
    "DEFAULT_SCENARIO",
    "data_dir",
    "demo_measurements",
    "run_pipeline",
    "run_demo",
    "get_scenario",
    "scenario_help",
    "DEMO_FILES",
    "STAGES",
]

#: Pipeline stages in order, with the module each needs.
STAGES = {
    "load plant": "perftest.plant.file",
    "read run": "perftest.importers",
    "choose window": "perftest.run.steady",
    "screen outliers": "perftest.run.outliers",
    "average": "perftest.run.measurements",
    "reconcile": "perftest.balance.plant",
    "evaluate": "perftest.evaluation.results",
    "write reports": "perftest.report",
}

# The defaults shared with the Python path and the command line (perftest.defaults).
DEFAULT_WINDOW = defaults.STEADY_WINDOW
DEFAULT_OUTLIER_ALPHA = defaults.OUTLIER_ALPHA


@dataclass(frozen=True)
class Scenario:
    """One bundled demo scenario.

    Attributes
    ----------
    name : str
        Folder name under ``sample_data/`` and the ``--scenario`` value.
    title : str
        One line for ``perftest demo --help``.
    kind : str
        ``[performance] kind`` of its plant file.
    files : tuple of str
        Run files, relative to the scenario folder.
    window : str or None
        Length of the steadiest window the demo averages, or None when the demo
        averages the stated ``start``..``end``.
    start, end : str or None
        Stated window (naive times in the plant's zone).
    """

    name: str
    title: str
    kind: str
    files: tuple
    window: str | None = DEFAULT_WINDOW
    start: str | None = None
    end: str | None = None


#: The bundled scenarios, by name.
SCENARIOS = {
    "brackenfold": Scenario(
        "brackenfold",
        "36 MW gas-fired condensing steam unit",
        "power",
        ("historian.csv", "logger.csv"),
    ),
    # A part-load test: the steadiest hour of the run could be any of its three
    # load points, so the demo states the full-load hour (sample_data/ostrenby).
    "ostrenby": Scenario(
        "ostrenby",
        "1.1 MW water-cooled R134a chiller, full-load hour of a test at three loads",
        "refrigeration",
        ("bms.csv", "testlog.csv"),
        window=None,
        start="2026-07-09 08:30:00",
        end="2026-07-09 09:30:00",
    ),
    "wrenhollow": Scenario(
        "wrenhollow",
        "15 MW CHP unit exporting process steam, condensate partly returned",
        "chp",
        ("dcs.csv", "testlog.csv"),
    ),
    "quellmoor": Scenario(
        "quellmoor",
        "8.5 MW gas-fired steam boiler, input-output and heat-loss methods reconciled",
        "boiler",
        ("dcs.csv",),
    ),
}

#: The scenario ``perftest demo`` runs when none is named.
DEFAULT_SCENARIO = "brackenfold"

#: Data files of the default scenario, relative to :func:`data_dir`.
DEMO_FILES = SCENARIOS[DEFAULT_SCENARIO].files


def get_scenario(name: str = DEFAULT_SCENARIO) -> Scenario:
    """The bundled scenario called ``name``.

    Raises
    ------
    InputError
        If there is no scenario of that name (the message lists them).
    """
    if name not in SCENARIOS:
        raise InputError(
            f"The 'scenario' parameter of perftest demo must be one of "
            f"{', '.join(SCENARIOS)}. Got {name!r}.",
            parameter="scenario",
        )
    return SCENARIOS[name]


def scenario_help() -> str:
    """One line per scenario, for the command's help."""
    return "; ".join(
        f"{s.name}{' (default)' if s.name == DEFAULT_SCENARIO else ''}: {s.title}, kind {s.kind}"
        for s in SCENARIOS.values()
    )


@dataclass
class Outcome:
    """What :func:`run_pipeline` produced.

    Attributes
    ----------
    plant, run, window_run, measurements, reconciliation, performance
        The objects of each stage (None when the stage did not run).
    report : perftest.report.ReportData or None
    written : dict
        Paths of the files written.
    timings : dict[str, float]
        Seconds per stage.
    missing : list of str
        Stages not run, with the reason.
    failure : str
        The error of a stage that failed after the earlier ones succeeded (the
        reports then hold what was computed); empty when none did.
    warnings : list of str
        Warnings issued by the stages (``"<stage>: <message>"``).
    test : perftest.evaluation.multirun.Campaign or None
        The test of several runs or load points (then ``window_run`` ...
        ``performance`` are those of its first window).
    """

    plant: object = None
    run: object = None
    window_run: object = None
    measurements: object = None
    reconciliation: object = None
    performance: object = None
    report: object = None
    written: dict = field(default_factory=dict)
    timings: dict = field(default_factory=dict)
    missing: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    failure: str = ""
    test: object = None


def data_dir(name: str = DEFAULT_SCENARIO) -> Path:
    """Folder of a demo scenario (``sample_data/<name>`` in the repository).

    Raises
    ------
    InputError
        If there is no scenario of that name.
    PerftestError
        If the folder is not there (perftest installed without its sample data).
    """
    import perftest

    name = get_scenario(name).name
    path = Path(perftest.__file__).resolve().parents[1] / "sample_data" / name
    if not (path / "plant.toml").is_file():
        raise PerftestError(
            f"The demo data were not found at {path}. The demo needs a source checkout of "
            "perftest installed with 'pip install -e .' (sample_data/ beside perftest/)."
        )
    return path


def demo_measurements(name: str = DEFAULT_SCENARIO):
    """A demo plant and its averaged measurements, as ``perftest demo`` makes them.

    The scenario's window (the steadiest :attr:`Scenario.window`, or its stated
    start and end) of the demo run, screened for outliers at
    :data:`DEFAULT_OUTLIER_ALPHA` and averaged; the demo's expected data-quality
    warnings are silenced.

    Parameters
    ----------
    name : str
        Scenario name (:data:`SCENARIOS`).

    Returns
    -------
    (Plant, Measurements)
    """
    import warnings as _warnings

    import perftest

    sc = get_scenario(name)
    folder = data_dir(name)
    plant = perftest.load_plant(folder / "plant.toml")
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        run = perftest.read_run([folder / f for f in sc.files], plant)
        chosen = (
            run.window(sc.start, sc.end) if sc.window is None else run.steadiest_window(sc.window)
        )
        m = chosen.screen_outliers(alpha=DEFAULT_OUTLIER_ALPHA).average()
    return plant, m


def _available(module: str) -> bool:
    try:
        return importlib.util.find_spec(module) is not None
    except (ImportError, ValueError):
        return False


def _source(p):
    """A run file's path as text, or a staged database source as it is."""
    return str(p) if isinstance(p, str | os.PathLike) else p


def run_pipeline(
    plant_path,
    data_paths: Sequence,
    *,
    out_dir=None,
    json_path=None,
    markdown_path=None,
    html_path=None,
    start=None,
    end=None,
    window: str | None = DEFAULT_WINDOW,
    eliminate: bool = defaults.ELIMINATE,
    outlier_alpha: float = DEFAULT_OUTLIER_ALPHA,
    figures: bool = True,
    progress: Callable[..., None] | None = None,
    runs=None,
    points=None,
) -> Outcome:
    """Run every stage from the files to the reports.

    Parameters
    ----------
    plant_path : path
        Plant TOML file.
    data_paths : sequence of path
        Run CSV files.
    out_dir : path, optional
        Write ``summary.json``, ``report.md``, ``report.html`` and ``figures/`` here.
    json_path, markdown_path, html_path : path, optional
        Write (only) these files.
    start, end : str or Timestamp, optional
        Average this window (either may be left open).  When neither is given the
        steadiest window of length ``window`` is searched.
    window : str or None
        Length of the steadiest window (e.g. ``"2h"``); ``None`` averages the whole
        run (or ``start``..``end``).
    eliminate : bool
        Drop suspect instruments one by one (serial elimination).
    outlier_alpha : float
        Significance level of the outlier screen.
    figures : bool
        Draw figures.
    progress : callable, optional
        ``progress(stage, event, seconds, message="")`` with event ``"start"``,
        ``"done"``, ``"skipped"`` or ``"warning"``.
    runs : sequence of (start, end), optional
        Repeated runs of one condition (:func:`perftest.evaluation.multirun.evaluate_test`):
        the summary's ``results`` are then their mean, with ``runs`` and
        ``repeatability``.  An empty sequence evaluates one window even when the plant
        file lists ``[[runs]]`` or ``[[points]]``.
    points : sequence of (label, start, end), optional
        Load points; the summary gains ``points``.  When neither ``runs`` nor
        ``points`` is given and no ``start``/``end`` is stated, the plant file's
        ``[[runs]]`` or ``[[points]]`` are used.

    Returns
    -------
    Outcome
    """
    out = Outcome()
    clock = time.perf_counter

    def stage(name: str, func, *needs):
        if any(n is None for n in needs):
            out.missing.append(f"{name} (needs an earlier stage)")
            if progress:
                progress(name, "skipped", 0.0)
            return None
        if not _available(STAGES[name]):
            out.missing.append(f"{name} ({STAGES[name]} is not available yet)")
            if progress:
                progress(name, "skipped", 0.0)
            return None
        if progress:
            progress(name, "start", 0.0)
        t0 = clock()
        # Warnings become report notes and progress lines instead of tracebacks.
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            value = func()
        out.timings[name] = clock() - t0
        for w in caught:
            text = " ".join(str(w.message).split())
            if f"{name}: {text}" not in out.warnings:
                out.warnings.append(f"{name}: {text}")
                if progress:
                    progress(name, "warning", 0.0, text)
        if progress:
            progress(name, "done", out.timings[name])
        return value

    def _load():
        from perftest.plant.file import load_plant

        return load_plant(plant_path)

    out.plant = stage("load plant", _load)

    def _read():
        from perftest.importers import read_run

        return read_run([_source(p) for p in data_paths], out.plant)

    out.run = stage("read run", _read, out.plant)

    if out.run is not None and (runs or points or (
        runs is None and points is None and start is None and end is None
        and _plant_lists_windows(out.plant)
    )):  # fmt: skip
        return _run_test(out, stage, runs=runs or None, points=points or None,
                         eliminate=eliminate, outlier_alpha=outlier_alpha, report_args=dict(
                             out_dir=out_dir, json_path=json_path, markdown_path=markdown_path,
                             html_path=html_path, figures=figures, data_paths=data_paths),
                         progress=progress)  # fmt: skip

    how = ""

    def _window():
        nonlocal how
        run = out.run
        if start is not None or end is not None:
            how = f"stated window {start or 'run start'} to {end or 'run end'}"
            return run.window(start, end)
        if window:
            how = f"steadiest {window} window of the run"
            return run.steadiest_window(window)
        how = "whole run"
        return run

    chosen = stage("choose window", _window, out.run)
    out.window_run = stage(
        "screen outliers", lambda: chosen.screen_outliers(alpha=outlier_alpha), chosen
    )
    out.measurements = stage("average", lambda: out.window_run.average(), out.window_run)

    def _reconcile():
        from perftest.balance.plant import reconcile

        return reconcile(out.plant, out.measurements, eliminate=eliminate)

    out.reconciliation = stage("reconcile", _reconcile, out.measurements)

    def _evaluate():
        from perftest.evaluation.results import evaluate

        return evaluate(out.plant, out.reconciliation)

    try:
        out.performance = stage("evaluate", _evaluate, out.reconciliation)
    except PerftestError as exc:
        # The stages before it stand: the reports are written with them, and the
        # failure is named in the reports and raised again by the caller.
        out.failure = f"evaluate failed: {' '.join(str(exc).split())}"
        out.missing.append(out.failure)
        if progress:
            progress("evaluate", "warning", 0.0, out.failure)

    def _options() -> dict:
        import inspect

        from perftest.evaluation.results import evaluate

        params = inspect.signature(evaluate).parameters
        return {
            "window": how,
            "steadiest_window_length": window if start is None and end is None else None,
            "start": None if start is None else str(start),
            "end": None if end is None else str(end),
            "outlier_alpha": outlier_alpha,
            "serial_elimination": eliminate,
            "reconciliation_alpha": getattr(out.reconciliation, "alpha", None),
            "coverage_level": params["level"].default,
            "monte_carlo_seed": params["seed"].default,
        }

    def _report():
        from perftest import report

        data = report.collect(
            out.plant,
            out.run,
            out.window_run,
            out.measurements,
            out.reconciliation,
            out.performance,
            how=how,
            missing=out.missing,
            timings=out.timings,
            notes=out.warnings,
            options=_options(),
            paths=[str(p) for p in data_paths if isinstance(p, str | os.PathLike)],
        )
        written = report.write_reports(
            data,
            out_dir,
            json_path=json_path,
            markdown_path=markdown_path,
            html_path=html_path,
            figures=figures,
        )
        return data, written

    wants_files = any(p is not None for p in (out_dir, json_path, markdown_path, html_path))
    if wants_files:
        # The report stage runs even when earlier stages are missing: it says which.
        done = stage("write reports", _report)
        if done is not None:
            out.report, out.written = done
            # Rewrite the summary so that it includes the report stage's own time.
            if out.written.get("summary"):
                from dataclasses import replace

                from perftest.report import write_summary

                out.report = replace(out.report, timings=dict(out.timings))
                write_summary(out.report, out.written["summary"])
    return out


def _plant_lists_windows(plant) -> bool:
    sections = getattr(plant, "sections", {}) or {}
    return bool(sections.get("runs") or sections.get("points"))


def _run_test(out: Outcome, stage, *, runs, points, eliminate, outlier_alpha, report_args,
              progress) -> Outcome:  # fmt: skip
    """The stages of a test of several runs or load points (see :func:`run_pipeline`)."""

    def _evaluate():
        from perftest.evaluation.multirun import evaluate_test

        return evaluate_test(out.plant, out.run, runs=runs, points=points, eliminate=eliminate,
                             outlier_alpha=outlier_alpha)  # fmt: skip

    try:
        out.test = stage("evaluate", _evaluate, out.run)
    except PerftestError as exc:
        out.failure = f"evaluate failed: {' '.join(str(exc).split())}"
        out.missing.append(out.failure)
        if progress:
            progress("evaluate", "warning", 0.0, out.failure)
    if out.test is not None:
        w = out.test.windows[0]
        out.window_run, out.measurements = w.window_run, w.measurements
        out.reconciliation, out.performance = w.reconciliation, w.performance
    paths = report_args.pop("data_paths")
    if not any(
        report_args.get(k) is not None
        for k in ("out_dir", "json_path", "markdown_path", "html_path")
    ):
        return out  # fmt: skip

    def _report():
        from perftest import report
        from perftest.report.campaign import with_campaign

        mode = out.test.mode if out.test is not None else "windows"
        data = report.collect(
            out.plant, out.run, out.window_run, out.measurements, out.reconciliation,
            out.performance, how=f"{mode} as stated", missing=out.missing,
            timings=out.timings, notes=out.warnings,
            options={"test": mode, "outlier_alpha": outlier_alpha,
                     "serial_elimination": eliminate},
            paths=[str(p) for p in paths if isinstance(p, str | os.PathLike)],
        )  # fmt: skip
        if out.test is not None:
            data = with_campaign(data, out.test)
        figures = report_args.pop("figures")
        return data, report.write_reports(data, **report_args, figures=figures)

    done = stage("write reports", _report)
    if done is not None:
        out.report, out.written = done
    return out


def run_demo(
    out_dir="perftest-demo",
    *,
    scenario: str | None = None,
    progress=None,
    figures: bool = True,
) -> Outcome:
    """Run a bundled demo scenario end to end.

    Parameters
    ----------
    out_dir : path
        Where ``summary.json``, ``report.md``, ``report.html`` and ``figures/`` go.
    scenario : str, optional
        Name of the scenario (:data:`SCENARIOS`); default :data:`DEFAULT_SCENARIO`,
        the Brackenfold steam unit.
    progress : callable, optional
        As for :func:`run_pipeline`.

    Returns
    -------
    Outcome

    Raises
    ------
    InputError
        If ``scenario`` names no bundled scenario.
    """
    sc = get_scenario(DEFAULT_SCENARIO if scenario is None else scenario)
    folder = data_dir(sc.name)
    return run_pipeline(
        folder / "plant.toml",
        [folder / f for f in sc.files],
        out_dir=out_dir,
        start=sc.start,
        end=sc.end,
        window=sc.window,
        eliminate=True,
        figures=figures,
        progress=progress,
    )
