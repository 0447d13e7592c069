"""The end-to-end path from files to reports, and the bundled demo scenario.

:func:`run_pipeline` runs every stage (load plant, read run files, choose the
window, screen outliers, average, reconcile with serial elimination, evaluate,
write reports), timing each one.  :func:`run_demo` runs it on the invented
Brackenfold unit 1 test in ``sample_data/brackenfold`` (see its README).

A stage whose module is not part of this installation is skipped and named in
``Outcome.missing``; the stages after it that need its output are skipped too.
Errors in the data or the plant file are raised as :class:`PerftestError`.
"""

from __future__ import annotations

import importlib.util
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

from perftest import defaults
from perftest.errors import PerftestError

__all__ = ["Outcome", "data_dir", "run_pipeline", "run_demo", "DEMO_FILES", "STAGES"]

#: Data files of the demo scenario, relative to :func:`data_dir`.
DEMO_FILES = ("historian.csv", "logger.csv")

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
    warnings : list of str
        Warnings issued by the stages (``"<stage>: <message>"``).
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


def data_dir() -> Path:
    """Folder of the demo scenario (``sample_data/brackenfold`` in the repository).

    Raises
    ------
    PerftestError
        If the folder is not there (perftest installed without its sample data).
    """
    import perftest

    path = Path(perftest.__file__).resolve().parents[1] / "sample_data" / "brackenfold"
    if not (path / "plant.toml").is_file():
        raise PerftestError(
            f"The demo data were not found at {path}. The demo needs a source checkout of "
            "perftest installed with 'pip install -e .' (sample_data/ beside perftest/)."
        )
    return path


def demo_measurements():
    """The demo plant and its averaged measurements, as ``perftest demo`` makes them.

    The steadiest :data:`DEFAULT_WINDOW` of the demo run, screened for outliers at
    :data:`DEFAULT_OUTLIER_ALPHA` and averaged; the demo's expected data-quality
    warnings are silenced.

    Returns
    -------
    (Plant, Measurements)
    """
    import warnings as _warnings

    import perftest

    folder = data_dir()
    plant = perftest.load_plant(folder / "plant.toml")
    with _warnings.catch_warnings():
        _warnings.simplefilter("ignore")
        run = perftest.read_run([folder / "historian.csv", folder / "logger.csv"], plant)
        m = (
            run.steadiest_window(DEFAULT_WINDOW)
            .screen_outliers(alpha=DEFAULT_OUTLIER_ALPHA)
            .average()
        )
    return plant, m


def _available(module: str) -> bool:
    try:
        return importlib.util.find_spec(module) is not None
    except (ImportError, ValueError):
        return False


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

        return read_run([str(p) for p in data_paths], out.plant)

    out.run = stage("read run", _read, out.plant)

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

    out.performance = stage("evaluate", _evaluate, out.reconciliation)

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
            paths=[str(p) for p in data_paths],
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


def run_demo(out_dir="perftest-demo", *, progress=None, figures: bool = True) -> Outcome:
    """Run the bundled Brackenfold unit 1 demo end to end.

    Parameters
    ----------
    out_dir : path
        Where ``summary.json``, ``report.md``, ``report.html`` and ``figures/`` go.
    progress : callable, optional
        As for :func:`run_pipeline`.

    Returns
    -------
    Outcome
    """
    folder = data_dir()
    return run_pipeline(
        folder / "plant.toml",
        [folder / f for f in DEMO_FILES],
        out_dir=out_dir,
        window=DEFAULT_WINDOW,
        eliminate=True,
        figures=figures,
        progress=progress,
    )
