"""The ``perftest`` command.

``perftest demo`` runs the bundled demo scenario end to end; ``perftest report``
evaluates a plant file and run files and writes the summary and reports.  Bad
input ends with one line ``perftest: error: <message>`` on stderr and exit
status 2, never a traceback.  Progress goes to stderr (``--quiet`` silences it),
the human summary to stdout.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from perftest import defaults
from perftest.errors import PerftestError

__all__ = ["main", "build_parser"]

_EPILOG = """\
examples:
  perftest demo --out perftest-demo
      run the bundled demo (an invented 36 MW steam unit) and write
      perftest-demo/summary.json, report.md, report.html and figures/

  perftest report plant.toml --data historian.csv --data logger.csv \\
      --window 2h --json summary.json --html report.html
      average the steadiest two hours, reconcile, evaluate and report

  perftest report plant.toml --data run.csv --start "2026-05-14 10:00" \\
      --end "2026-05-14 12:00" --markdown report.md
      average a stated window instead

  perftest report plant.toml --data run.csv --run "2026-05-14 09:00" \\
      "2026-05-14 10:30" --run "2026-05-14 10:30" "2026-05-14 12:00" --out out/
      two repeated runs: each evaluated alone, the result is their mean

  perftest report chiller.toml --data bms.csv --point "100 %" 08:30 09:30 \\
      --point "75 %" 10:00 11:00 --out out/
      load points: results and guarantee verdicts per point

The plant file format is described in docs/plant-file.md.  Results support,
and do not replace, the applicable test code and engineering judgement.
"""


class _Parser(argparse.ArgumentParser):
    """argparse with the house error format: one line, exit status 2."""

    def error(self, message):  # noqa: D401 - argparse API
        sys.stderr.write(f"perftest: error: {message}\n")
        raise SystemExit(2)


def _probability(text: str) -> float:
    """argparse type: a significance level strictly between 0 and 1."""
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not 0.0 < value < 1.0:
        raise argparse.ArgumentTypeError(
            f"must be a significance level between 0 and 1 (e.g. 0.01); got {text!r}"
        )
    return value


# Durations on the command line: a bare number is seconds, as in the plant file.
# The bounds refuse what cannot be meant: below a millisecond no plant log samples,
# and no test or monitoring job spans more than ten years.
_MIN_DURATION = 1e-3  # [s]
_MAX_DURATION = 10 * 366 * 86400.0  # [s]


def duration(text: str) -> str:
    """argparse type: a duration such as '2h', '30min', '90s' or a bare number of
    seconds ('7200'); returned as text pandas reads ('7200s')."""
    import re

    import pandas as pd

    raw = str(text).strip()
    try:
        if re.fullmatch(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?", raw):
            seconds = float(raw)  # a bare number: seconds, never nanoseconds
            raw = f"{seconds}s"
        else:
            seconds = pd.Timedelta(raw).total_seconds()
    except (TypeError, ValueError, OverflowError):
        raise argparse.ArgumentTypeError(
            f"must be a duration such as '2h', '30min' or '7200' (seconds). Got {text!r}."
        ) from None
    if not _MIN_DURATION <= seconds <= _MAX_DURATION:
        raise argparse.ArgumentTypeError(
            f"must be a duration between 1 ms and 10 years (a bare number is seconds). "
            f"Got {text!r} = {seconds:g} s."
        )
    return raw


def _whole_runs(text: str) -> int:
    """argparse type of plan --runs: a whole number >= 1."""
    try:
        value = int(str(text).strip())
    except ValueError:
        value = 0
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a whole number of runs >= 1. Got {text!r}.")
    return value


def _window_length(text: str) -> str:
    """argparse type of --window: a duration, or 'all' for the whole run."""
    return "all" if str(text).strip().lower() in ("all", "none") else duration(text)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``perftest`` command."""
    from perftest import __version__

    p = _Parser(
        prog="perftest",
        description=(
            "Turn a logged thermal-plant test run into a defensible result: averages with "
            "uncertainty, reconciled balances, suspect instruments, efficiency, heat rate, "
            "Carnot bound, corrected results and guarantee verdicts."
        ),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--version", action="version", version=f"perftest {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    common = _Parser(add_help=False)
    common.add_argument(
        "-q", "--quiet", action="store_true", help="no progress lines on stderr (default: shown)"
    )
    common.add_argument(
        "--no-figures",
        action="store_true",
        help="skip the figures (faster; reports without plots; default: drawn)",
    )

    d = sub.add_parser(
        "demo",
        parents=[common],
        help="run the bundled demo scenario end to end",
        description="Run a bundled demo: by default an invented 36 MW gas-fired steam unit "
        "(sample_data/brackenfold); --scenario names another. Writes summary.json, "
        "report.md, report.html and figures/*.png into the output folder.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    d.add_argument(
        "--out",
        metavar="DIR",
        default="perftest-demo",
        help="output folder (default: ./perftest-demo)",
    )
    from perftest.demo import DEFAULT_SCENARIO, scenario_help

    d.add_argument(
        "--scenario",
        metavar="NAME",
        default=DEFAULT_SCENARIO,
        help=f"bundled scenario to run. {scenario_help()}",
    )

    r = sub.add_parser(
        "report",
        parents=[common],
        help="evaluate a test run and write the reports",
        description="Evaluate a test run: read the run files with the plant file, choose "
        "the window, screen outliers, average, reconcile (dropping suspect instruments "
        "one by one), compute the results and write the chosen reports.",
        epilog="example:\n  perftest report plant.toml --data run.csv --window 2h "
        "--json summary.json --html report.html",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    r.add_argument("plant", metavar="PLANT.toml", help="plant description file")
    r.add_argument(
        "--data",
        metavar="RUN.csv",
        action="append",
        help="run file: .csv, .xlsx (book.xlsx#Sheet names a sheet) or .parquet (repeat for "
        "several files; or --sql with --query; required unless --sql is given)",
    )
    from perftest.importers.sources import add_sql_arguments

    add_sql_arguments(r)
    r.add_argument(
        "--start",
        metavar="T",
        help="window start, e.g. '2026-05-14 10:00' (in the plant's time zone unless it "
        "carries an offset; default: search the steadiest window)",
    )
    r.add_argument(
        "--end",
        metavar="T",
        help="window end (default: --start plus --window when --window is given, else "
        "the end of the run)",
    )
    r.add_argument(
        "--window",
        metavar="LENGTH",
        type=_window_length,
        help="window length, e.g. 2h, 30min or 7200 (seconds): with --start (or --end) "
        "the window from there; alone, the steadiest window of that length "
        "(default " + defaults.STEADY_WINDOW + "); 'all' averages the whole run",
    )
    r.add_argument(
        "--run",
        metavar=("START", "END"),
        nargs=2,
        action="append",
        help="a repeated run of one condition (repeat for each run, at least two): each "
        "is evaluated alone and the result is their mean with the covariance between "
        "runs (default: the plant file's [[runs]], else one window)",
    )
    r.add_argument(
        "--point",
        metavar=("LABEL", "START", "END"),
        nargs=3,
        action="append",
        help="a load point (repeat for each point): results, corrections and guarantee "
        "verdicts per point (default: the plant file's [[points]], else one window)",
    )
    r.add_argument(
        "--outlier-alpha",
        metavar="ALPHA",
        type=_probability,
        default=defaults.OUTLIER_ALPHA,
        help=f"significance level of the outlier screen (default {defaults.OUTLIER_ALPHA})",
    )
    r.add_argument(
        "--keep-all",
        action="store_true",
        help="do not drop suspect instruments (default: serial elimination drops them)",
    )
    r.add_argument(
        "--out",
        metavar="DIR",
        help="write summary.json, report.md, report.html and figures/ here (default: "
        "none; with no output option the summary is printed only)",
    )
    r.add_argument("--json", metavar="FILE", help="write the summary JSON here (default: none)")
    r.add_argument("--html", metavar="FILE", help="write the HTML report here (default: none)")
    r.add_argument(
        "--markdown",
        metavar="FILE",
        help="write the Markdown report here, figures in figures/ beside it (default: none)",
    )

    pl = sub.add_parser(
        "plan",
        help="predict the uncertainty of a planned test (pre-test analysis)",
        description="Pre-test uncertainty analysis: from the plant file's [design] values "
        "and instrument list, predict each result's U95 with and without reconciliation, "
        "rank the instruments by their share and show what upgrading one would change.",
        epilog="example:\n  perftest plan plant.toml --duration 2h --interval 1min "
        "--markdown plan.md",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    pl.add_argument("plant", metavar="PLANT.toml", help="plant description file")
    pl.add_argument(
        "--duration",
        metavar="T",
        type=duration,
        help="planned test duration, e.g. 2h or 7200 (seconds) (default: the plant "
        "file's [design] duration)",
    )
    pl.add_argument(
        "--interval",
        metavar="T",
        type=duration,
        help="sampling interval of every tag, e.g. 1min or 60 (seconds) (default: the "
        "plant file's [design] interval)",
    )
    pl.add_argument(
        "--upgrade-factor",
        metavar="F",
        type=float,
        default=0.5,
        help="what-if: one instrument's systematic uncertainty times F (default 0.5)",
    )
    pl.add_argument(
        "--runs",
        metavar="N",
        type=_whole_runs,
        help="repeated runs planned: also predict the U95 of their mean (default: the plant "
        "file's [design] runs, else 1)",
    )
    pl.add_argument(
        "--no-what-if", action="store_true", help="skip the what-if table (faster; default: shown)"
    )
    pl.add_argument("--json", metavar="FILE", help="write the plan as JSON here (default: none)")
    pl.add_argument(
        "--markdown", metavar="FILE", help="write the plan as Markdown here (default: none)"
    )

    from perftest.scale.monitor import add_parser as _add_monitor

    _add_monitor(sub, common, duration=duration)
    return p


class _Progress:
    """Stage lines on stderr: '[  1.2 s] reconcile ... done (0.8 s)'."""

    def __init__(self, quiet: bool):
        self.quiet = quiet
        self.t0 = time.perf_counter()

    def __call__(self, stage: str, event: str, seconds: float, message: str = "") -> None:
        if self.quiet:
            return
        now = time.perf_counter() - self.t0
        if event == "start":
            sys.stderr.write(f"[{now:6.1f} s] {stage} ...\n")
        elif event == "skipped":
            sys.stderr.write(f"[{now:6.1f} s] {stage}: not available, skipped\n")
        elif event == "warning":
            sys.stderr.write(f"[{now:6.1f} s] {stage}: warning: {message}\n")
        sys.stderr.flush()


def _fmt_result(perf, name: str, unit: str, scale: float = 1.0, offset: float = 0.0) -> str:
    from perftest.report.document import fmt_uncertain

    r = perf.results.loc[name]
    v, U = fmt_uncertain(r["value"] * scale + offset, r["U95"] * abs(scale))
    sp = f" {unit}" if unit else ""
    return f"{v}{sp} +- {U}{sp}"


def _summary(outcome, out=None) -> None:
    w = (out or sys.stdout).write
    perf = outcome.performance
    rec = outcome.reconciliation
    plant = outcome.plant
    w(f"{getattr(plant, 'name', 'plant')}\n")
    test = getattr(outcome, "test", None)
    if test is not None:
        # each window has its own reconciliation: its lines follow its label
        perf = _test_lines(test, w)
    else:
        m = outcome.measurements
        if m is not None and m.start is not None:
            w(f"  window            {m.start} to {m.end}\n")
        if rec is not None:
            _reconciliation_lines(rec, w)
    if perf is not None:
        rows = [
            ("net power", "net_power", "MW", 1e-6, 0.0),
            ("heat input", "heat_input", "MW", 1e-6, 0.0),
            ("efficiency (net)", "first_law_efficiency", "%", 100.0, 0.0),
            ("heat rate", "heat_rate", "kJ/kWh", 3600.0, 0.0),
            ("Carnot bound", "carnot_efficiency", "%", 100.0, 0.0),
            ("heat export", "heat_export", "MW", 1e-6, 0.0),
            ("fuel utilisation", "fuel_utilisation", "%", 100.0, 0.0),
            ("cooling capacity", "cooling_capacity", "kW", 1e-3, 0.0),
            ("heating capacity", "heating_capacity", "kW", 1e-3, 0.0),
            ("power input", "power_input", "kW", 1e-3, 0.0),
            ("COP", "cop", "kW/kW", 1.0, 0.0),
            ("Carnot COP", "carnot_cop", "kW/kW", 1.0, 0.0),
            ("second-law eff.", "second_law_efficiency", "%", 100.0, 0.0),
            ("boiler (direct)", "boiler_efficiency_direct", "%", 100.0, 0.0),
            ("boiler (losses)", "boiler_efficiency_indirect", "%", 100.0, 0.0),
            ("boiler (reconc.)", "boiler_efficiency", "%", 100.0, 0.0),
        ]
        for label, name, unit, scale, off in rows:
            if name in perf.results.index:
                w(f"  {label:<17} {_fmt_result(perf, name, unit, scale, off)} (U95)\n")
        for g in perf.guarantees.itertuples(index=False):
            w(f"  guarantee         {g.quantity} {g.direction.replace('_', ' ')}: {g.verdict}\n")
    for item in outcome.missing:
        w(f"  not computed      {item}\n")
    for key in ("summary", "markdown", "html"):
        if outcome.written.get(key):
            w(f"  wrote             {outcome.written[key]}\n")
    if outcome.written.get("figures"):
        first = next(iter(outcome.written["figures"].values()))
        w(f"  wrote             {len(outcome.written['figures'])} figures in {first.parent}\n")
    if outcome.timings:
        total = sum(outcome.timings.values())
        w(
            f"  time              {total:.2f} s: "
            + ", ".join(f"{k} {v:.2f}" for k, v in outcome.timings.items())
            + "\n"
        )


def _reconciliation_lines(rec, w, indent: str = "  ") -> None:
    """Global test, dropped instruments and suspects of one reconciliation."""
    width = 19 - len(indent)  # the values start in one column whatever the indent
    gt = rec.global_test
    w(
        f"{indent}{'global test':<{width}} chi2 = {gt['chi2']:.2f}, dof = {gt['dof']}, "
        f"p = {gt['p_value']:.3f} ({'passed' if gt['passed'] else 'failed'})\n"
    )
    for e in rec.eliminated:
        w(f"{indent}{'dropped':<{width}} {e.tag} (|z| = {abs(e.z):.2f})\n")
    frame = rec.to_frame(units="si")
    sus = [t for t, s in zip(frame["tag"], frame["suspect"], strict=True) if s]
    if sus:
        w(f"{indent}{'suspects':<{width}} {', '.join(sus)}\n")


def _test_lines(test, w):
    """Lines of a test of several windows; returns what the result lines should show."""
    from types import SimpleNamespace

    for win in test.windows:
        w(f"  {win.label:<17} {win.start:%Y-%m-%d %H:%M} to {win.end:%H:%M}\n")
        if getattr(win, "reconciliation", None) is not None:
            _reconciliation_lines(win.reconciliation, w, indent="    ")
    if test.mode == "runs":
        rep = test.repeatability
        bad = [str(n) for n, r in rep.iterrows() if r["passed"] is False]
        w(f"  repeatability     {'runs agree' if not bad else 'runs disagree: ' + ', '.join(bad)}"
          f" (chi-squared of the random parts, 95 %)\n")  # fmt: skip
        w(f"  test result       mean of {len(test.windows)} runs:\n")
        return SimpleNamespace(results=test.results, guarantees=test.guarantees)
    for win in test.windows:
        for g in win.performance.guarantees.itertuples(index=False):
            w(f"  guarantee         {win.label}: {g.quantity} {g.direction.replace('_', ' ')}: "
              f"{g.verdict}\n")  # fmt: skip
    from perftest.display.format import result_unit, unit_label

    for name, r in test.results.iterrows():
        unit, scale, off = result_unit(name, r["unit"], r["value"])
        label = unit_label(unit) if unit not in ("1", "") else ""
        w(f"  {name:<17} {_fmt_result(test, name, label, scale, off)} (U95)\n")
    return None


def _run(args) -> int:
    from perftest.demo import run_demo, run_pipeline

    if args.command == "plan":
        from perftest.report.plan import run_plan_command

        return run_plan_command(args)
    if args.command == "monitor":
        from perftest.scale.monitor import run_command

        return run_command(args)
    progress = _Progress(args.quiet)
    if args.command == "demo":
        outcome = run_demo(
            args.out, scenario=args.scenario, progress=progress, figures=not args.no_figures
        )
    else:
        plant = Path(args.plant)
        if not plant.is_file():
            raise PerftestError(f"{plant}: plant file not found.", file=plant)
        from perftest.importers.sources import sources_from_options

        sources = sources_from_options(args.data, args.sql, args.query)
        from perftest.report.output import check_outputs, report_paths

        check_outputs(
            report_paths(args.out, json_path=args.json, markdown_path=args.markdown,
                         html_path=args.html, figures=not args.no_figures),
            {"--data": [Path(f) for f in args.data or ()], "plant file": [plant],
             "--sql": _database_files(args.sql)},
        )  # fmt: skip
        start, end, window = _window_options(args)
        runs, points = _test_options(args)
        outcome = run_pipeline(
            plant,
            sources,
            out_dir=args.out,
            json_path=args.json,
            html_path=args.html,
            markdown_path=args.markdown,
            start=start,
            end=end,
            window=window,
            eliminate=not args.keep_all,
            outlier_alpha=args.outlier_alpha,
            figures=not args.no_figures,
            progress=progress,
            runs=runs,
            points=points,
        )
    _summary(outcome)
    failure = getattr(outcome, "failure", None)
    if failure:
        # the stages before the failure were written; the failure is the one error line
        wrote = [str(p) for k, p in outcome.written.items() if k != "figures" and p]
        kept = f" Written with the stages computed before it: {', '.join(wrote)}." if wrote else ""
        raise PerftestError(f"{failure}{kept}")
    return 0


def _database_files(url) -> list:
    """The database file behind ``--sql`` ([] for a server or none)."""
    from perftest.importers.sources import database_file

    path = database_file(url)
    return [path] if path is not None else []


def _test_options(args) -> tuple:
    """(runs, points) of ``perftest report``: None each to use the plant file's, ``()``
    for one window (a window option was given)."""
    runs = [tuple(r) for r in args.run] if args.run else None
    points = [tuple(p) for p in args.point] if args.point else None
    if runs and points:
        raise PerftestError(
            "--run and --point cannot be combined: a test is either repeated runs of one "
            "condition or a set of load points."
        )
    if (runs or points) and (args.start or args.end or args.window):
        raise PerftestError(
            f"{'--run' if runs else '--point'} states the windows; it cannot be combined "
            "with --start, --end or --window (they choose a single window)."
        )
    if runs is not None and len(runs) < 2:
        raise PerftestError(
            "--run needs at least two runs (repeat --run START END); for one window use "
            "--start and --end."
        )
    if runs is None and points is None and (args.start or args.end or args.window):
        return (), None
    return runs, points


def _window_options(args) -> tuple:
    """(start, end, steadiest-window length) of ``perftest report``.

    ``--window`` with ``--start`` (or ``--end``) means that window from there; with
    both ``--start`` and ``--end`` it would be a second, conflicting length.
    """
    import pandas as pd

    start, end, length = args.start, args.end, args.window
    if length is None:
        return start, end, (defaults.STEADY_WINDOW if start is None and end is None else None)
    if length == "all":
        if start is not None or end is not None:
            raise PerftestError(
                "--window all averages the whole run; it cannot be combined with --start "
                "or --end. Leave out one or the other."
            )
        return None, None, None
    if start is None and end is None:
        return None, None, length
    if start is not None and end is not None:
        raise PerftestError(
            f"--start {start}, --end {end} and --window {length} state the window twice. "
            "Give --start with --end, or --start (or --end) with --window."
        )
    step = pd.Timedelta(length)
    try:
        if start is not None:
            return start, str(pd.Timestamp(start) + step), None
        return str(pd.Timestamp(end) - step), end, None
    except (TypeError, ValueError):
        return start, end, None  # not a time: Run.window names the parameter


def main(argv=None) -> int:
    """Entry point of the ``perftest`` console script; returns the exit status."""
    import os

    argv = list(sys.argv[1:] if argv is None else argv)
    # --debug (anywhere on the line) or PERFTEST_DEBUG=1 shows the traceback of an
    # internal error instead of the one-line message.
    debug = "--debug" in argv or os.environ.get("PERFTEST_DEBUG", "") not in ("", "0")
    argv = [a for a in argv if a != "--debug"]
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help(sys.stderr)
        return 2
    try:
        return _run(args)
    except PerftestError as exc:
        msg = " ".join(str(exc).split())  # one line, whatever the message holds
        sys.stderr.write(f"perftest: error: {msg}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("perftest: error: interrupted\n")
        return 130
    except OSError as exc:  # a file or folder that cannot be read or written
        where = f"{exc.filename}: " if exc.filename else ""
        sys.stderr.write(f"perftest: error: {where}{exc.strerror or exc}\n")
        return 2
    except Exception as exc:  # an internal error: a bug, not the user's input
        if debug:
            import traceback

            traceback.print_exc(file=sys.stderr)
        detail = " ".join(str(exc).split())
        command = " ".join(["perftest", *argv])
        sys.stderr.write(
            f"perftest: internal error: {type(exc).__name__}: {detail} -- this is a bug in "
            f"perftest; please report it with the command ({command}) and the output of "
            "'perftest --version'; rerun with --debug (or PERFTEST_DEBUG=1) for the "
            "traceback\n"
        )
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
