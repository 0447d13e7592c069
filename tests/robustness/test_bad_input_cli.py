"""Truth table of command lines that must end in a user error.

The CLI contract (DEVELOPERS.md, docs/architecture.md): a user mistake prints exactly
one line ``perftest: error: <message>`` on stderr and exits with status 2, with no
traceback; an internal error (a bug) prints one line ``perftest: internal error:
<exception>`` with a hint to report it and exits with status 1; ``--debug`` or
``PERFTEST_DEBUG=1`` adds the traceback.
"""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from perftest.cli import main

from .conftest import DEMO, PLANT, RUN, write_bytes, write_text


@pytest.fixture
def files(tmp_path):
    """A small valid plant and run file, and paths to bad ones."""
    out = {
        "plant": write_text(tmp_path, "plant.toml", PLANT),
        "run": write_text(tmp_path, "run.csv", RUN),
        "bad_toml": write_text(tmp_path, "bad.toml", "[site\nname = 1\n"),
        "empty_csv": write_bytes(tmp_path, "empty.csv", b""),
        "binary_csv": write_bytes(tmp_path, "binary.csv", b"\x00\xff\x10garbage\x00\x00"),
        "back_csv": write_text(
            tmp_path,
            "back.csv",
            RUN.replace("10:01:00", "09:59:00"),
        ),
        "missing_col_csv": write_text(
            tmp_path, "nocol.csv", "time,TT-1\n2031-05-04 10:00:00,150\n2031-05-04 10:01:00,151\n"
        ),
        "a_file": write_text(tmp_path, "a_file", "x"),
        # read only after the output check, so their contents need not be valid
        "book": write_bytes(tmp_path, "book.xlsx", b"PK not a workbook"),
        "db": write_bytes(tmp_path, "run.db", b"not a database"),
        "dst_plant": write_text(tmp_path, "dst.toml", DST_PLANT),
        "time_tag_plant": write_text(
            tmp_path, "timetag.toml", PLANT + '\n[tags.XT-1]\nunit = "bar"\ncolumn = "time"\n'
        ),
        "demo_plant": DEMO / "plant.toml",
        "historian": DEMO / "historian.csv",
        "logger": DEMO / "logger.csv",
        "tmp": tmp_path,
    }
    # the same file under other names: a symbolic and a hard link
    (tmp_path / "link.csv").symlink_to(out["run"])
    os.link(out["run"], tmp_path / "hard.csv")
    # a folder that an earlier monitor job filled, holding an input under an output name
    (tmp_path / "mon" / "windows.parquet").mkdir(parents=True)
    write_text(tmp_path / "mon", "windows.csv", RUN)
    write_text(tmp_path / "mon" / "windows.parquet", "old.csv", RUN)
    (tmp_path / "o").mkdir()
    write_text(tmp_path / "o", "summary.json", RUN)
    # a report folder whose figures/ holds an input under a figure's name, and one
    # whose figures/ is a file
    (tmp_path / "f" / "figures").mkdir(parents=True)
    write_text(tmp_path / "f" / "figures", "flows.png", RUN)
    (tmp_path / "g").mkdir()
    write_text(tmp_path / "g", "figures", RUN)
    return out


# A plant in a zone with clock changes (Central European Time, invented rig): on
# 2031-03-30 the clocks go from 02:00 to 03:00, on 2031-10-26 from 03:00 back to
# 02:00 (EU summer time rule, from memory).
DST_PLANT = PLANT.replace(
    'name = "Robustness rig"', 'name = "Robustness rig"\ntimezone = "Europe/Berlin"'
)

_DEMO = ["{demo_plant}", "--data", "{historian}", "--data", "{logger}", "-q", "--no-figures"]


def _args(template: list, files: dict) -> list:
    return [str(a).format(**files) if isinstance(a, str) else str(a) for a in template]


# (argument template, fragment of the one stderr line)
USER_ERRORS = [
    pytest.param(["frobnicate"], r"invalid choice: 'frobnicate'", id="unknown-command"),
    pytest.param(["report"], r"required", id="report-no-plant"),
    pytest.param(["report", "{plant}"], r"--data", id="report-no-data"),
    pytest.param(
        ["report", "{tmp}/none.toml", "--data", "{run}", "--json", "{tmp}/s.json"],
        r"none\.toml: plant file not found",
        id="plant-not-found",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{tmp}/none.csv", "--json", "{tmp}/s.json"],
        r"none\.csv: run file not found",
        id="run-not-found",
    ),
    pytest.param(
        ["report", "{bad_toml}", "--data", "{run}", "--json", "{tmp}/s.json"],
        r"bad\.toml, line 1, column \d+: not valid TOML",
        id="plant-not-toml",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{empty_csv}", "--json", "{tmp}/s.json"],
        r"empty\.csv",
        id="run-empty",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{binary_csv}", "--json", "{tmp}/s.json"],
        r"binary\.csv",
        id="run-binary",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{back_csv}", "--json", "{tmp}/s.json"],
        r"back\.csv, line \d.*earlier than",
        id="run-time-backwards",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{missing_col_csv}", "--json", "{tmp}/s.json"],
        r"Tag 'PT-1'.*no column 'PT-1'",
        id="plant-tag-not-in-run",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--outlier-alpha", "abc", "--json", "x"],
        r"--outlier-alpha: must be a significance level between 0 and 1.*'abc'",
        id="alpha-not-a-number",
    ),
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--outlier-alpha",
            "5",
            "--window",
            "all",
            "--json",
            "{tmp}/s.json",
        ],
        r"--outlier-alpha: must be a significance level between 0 and 1.*'5'",
        id="alpha-out-of-range",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--window", "forever", "--json", "{tmp}/s.json"],
        r"must be a duration such as '2h'.*Got 'forever'",
        id="window-not-a-duration",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--window", "5h", "--json", "{tmp}/s.json"],
        r"is longer than the run",
        id="window-longer-than-run",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--start", "teatime", "--json", "{tmp}/s.json"],
        r"'start' parameter.*must be a time.*Got 'teatime'",
        id="start-not-a-time",
    ),
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--start",
            "2031-05-04 10:03",
            "--end",
            "2031-05-04 10:00",
            "--json",
            "{tmp}/s.json",
        ],
        r"'end' parameter.*must be later than 'start'",
        id="start-after-end",
    ),
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--start",
            "2040-01-01 00:00",
            "--json",
            "{tmp}/s.json",
        ],
        r"No sample of the run falls in the window 2040-01-01",
        id="window-outside-run",
    ),
    pytest.param(
        ["report", "{demo_plant}", "--data", "{run}", "--json", "{tmp}/s.json"],
        r"Tag 'PT-101': its source 'historian' names no file of this run",
        id="run-of-another-plant",
    ),
    pytest.param(
        [
            "report",
            "{demo_plant}",
            "--data",
            "{historian}",
            "--data",
            "{logger}",
            "--no-figures",
            "-q",
            "--json",
            "{a_file}/summary.json",
        ],
        r"a_file",
        id="output-below-a-file",
    ),
    pytest.param(
        ["demo", "--no-figures", "-q", "--out", "{a_file}"],
        r"a_file",
        id="demo-out-is-a-file",
    ),
    # ---- an output on an input, two outputs on one path (issue 17)
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--json", "{run}"],
        r"run\.csv: the output --json is the input --data",
        id="json-is-the-run-file",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--markdown", "{plant}"],
        r"plant\.toml: the output --markdown is the input plant file",
        id="markdown-is-the-plant-file",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--html", "{tmp}/link.csv"],
        r"link\.csv: the output --html is the input --data",
        id="html-is-a-symlink-to-the-run",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--json", "{tmp}/hard.csv"],
        r"hard\.csv: the output --json is the input --data",
        id="json-is-a-hard-link-to-the-run",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{book}#Log", "--json", "{book}"],
        r"book\.xlsx: the output --json is the input --data",
        id="json-is-the-workbook-of-a-sheet",
    ),
    pytest.param(
        ["report", "{plant}", "--sql", "sqlite:///{db}", "--query", "SELECT 1", "--html", "{db}"],
        r"run\.db: the output --html is the input --sql",
        id="html-is-the-sqlite-database",
    ),
    pytest.param(
        [
            "monitor",
            "{plant}",
            "--sql",
            "sqlite:///{tmp}/mon/windows.csv",
            "--query",
            "SELECT 1",
            "--out",
            "{tmp}/mon",
        ],
        r"windows\.csv: the output --out \(windows\.csv\) is the input --sql",
        id="monitor-out-holds-the-sqlite-database",
    ),  # fmt: skip
    pytest.param(
        ["report", "{plant}", "--data", "{tmp}/o/summary.json", "--out", "{tmp}/o"],
        r"summary\.json: the output --out \(summary\.json\) is the input --data",
        id="out-folder-file-is-an-input",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--json", "{tmp}/x", "--html", "{tmp}/x"],
        r"the outputs --json and --html are one file",
        id="json-and-html-on-one-path",
    ),
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--out",
            "{tmp}/r",
            "--html",
            "{tmp}/r/summary.json",
        ],
        r"the outputs --html and --out \(summary\.json\) are one file",
        id="html-on-the-out-folder-summary",
    ),  # fmt: skip
    pytest.param(
        ["report", "{plant}", "--data", "{tmp}/f/figures/flows.png", "--out", "{tmp}/f"],
        r"flows\.png: the output --out \(figures/\*\.png\) is the input --data",
        id="report-figure-is-an-input",
    ),
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--markdown",
            "{tmp}/m/r.md",
            "--json",
            "{tmp}/m/figures/budget.png",
        ],
        r"the outputs --json and --markdown \(figures/\*\.png\) are one file",
        id="report-json-on-a-figure",
    ),  # fmt: skip
    pytest.param(
        ["report", "{plant}", "--data", "{tmp}/g/figures", "--out", "{tmp}/g"],
        r"figures: the output folder of --out \(figures/\*\.png\) is a file",
        id="report-figures-folder-is-an-input-file",
    ),
    pytest.param(
        ["plan", "{plant}", "--json", "{plant}"],
        r"plant\.toml: the output --json is the input plant file",
        id="plan-json-is-the-plant-file",
    ),
    pytest.param(
        ["plan", "{plant}", "--json", "{tmp}/p", "--markdown", "{tmp}/p"],
        r"the outputs --json and --markdown are one file",
        id="plan-json-and-markdown-on-one-path",
    ),
    pytest.param(
        ["monitor", "{plant}", "--data", "{tmp}/mon/windows.csv", "--out", "{tmp}/mon"],
        r"windows\.csv: the output --out \(windows\.csv\) is the input --data",
        id="monitor-out-holds-the-run-file",
    ),
    pytest.param(
        ["monitor", "{plant}", "--data", "{tmp}/mon/windows.parquet/old.csv", "--out", "{tmp}/mon"],
        r"old\.csv: the input --data lies in the output folder",
        id="monitor-store-holds-the-run-file",
    ),  # fmt: skip
    # ---- durations on the command line: a bare number is seconds (issue 17)
    pytest.param(
        ["plan", "{plant}", "--duration", "0"],
        r"--duration: must be a duration between 1 ms and 10 years.*Got '0' = 0 s",
        id="plan-duration-zero",
    ),
    pytest.param(
        ["plan", "{plant}", "--interval", "1e-9"],
        r"--interval: must be a duration between 1 ms and 10 years.*1e-09 s",
        id="plan-interval-a-nanosecond",
    ),
    pytest.param(
        ["plan", "{plant}", "--duration", "1e12"],
        r"--duration: must be a duration between 1 ms and 10 years",
        id="plan-duration-absurd",
    ),
    pytest.param(
        ["plan", "{plant}", "--duration", "soon"],
        r"--duration: must be a duration such as '2h'.*Got 'soon'",
        id="plan-duration-not-a-duration",
    ),
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--window", "-30"],
        r"--window: must be a duration between 1 ms and 10 years",
        id="window-negative",
    ),
    pytest.param(
        ["monitor", "{plant}", "--data", "{run}", "--out", "{tmp}/m", "--every", "often"],
        r"--every: must be a duration such as '2h'.*Got 'often'",
        id="monitor-every-not-a-duration",
    ),
    # ---- the window stated twice
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--start",
            "2031-05-04 10:00",
            "--end",
            "2031-05-04 10:02",
            "--window",
            "30min",
        ],
        r"state the window twice",
        id="start-end-and-window",
    ),  # fmt: skip
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--start", "2031-05-04 10:00", "--window", "all"],
        r"--window all averages the whole run; it cannot be combined with --start",
        id="window-all-with-start",
    ),  # fmt: skip
    # ---- a start at a clock change, in the plant's time zone
    pytest.param(
        ["report", "{dst_plant}", "--data", "{run}", "--start", "2031-03-30 02:30"],
        r"'2031-03-30 02:30', a local time that does not exist in time zone Europe/Berlin"
        r".*'2031-03-30T02:30:00\+01:00'",
        id="start-in-the-skipped-hour",
    ),
    pytest.param(
        ["report", "{dst_plant}", "--data", "{run}", "--start", "2031-10-26 02:30"],
        r"'2031-10-26 02:30', a local time that occurs twice in time zone Europe/Berlin"
        r".*'2031-10-26T02:30:00\+02:00' or '2031-10-26T02:30:00\+01:00'",
        id="start-in-the-repeated-hour",
    ),
    # ---- messages a user can act on
    pytest.param(
        ["report", "{time_tag_plant}", "--data", "{run}"],
        r"Tag 'XT-1' of the plant file: its column 'time' is the time column of run\.csv",
        id="tag-on-the-time-column",
    ),
    pytest.param(
        ["report", *_DEMO, "--start", "2026-05-14 10:00", "--end", "2026-05-14 10:00:30"],
        r"covariance is singular.*tags (TT-18[12], ){1,}.*1 sample\(s\) each.*window is too "
        r"short or the tags are constant",
        id="window-of-one-sample",
    ),
    # ---- tests of several runs or load points
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--run", "2031-05-04 10:00", "2031-05-04 10:02"],
        r"--run needs at least two runs",
        id="one-run",
    ),  # fmt: skip
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--run",
            "2031-05-04 10:00",
            "2031-05-04 10:02",
            "--point",
            "a",
            "2031-05-04 10:00",
            "2031-05-04 10:02",
        ],
        r"--run and --point cannot be combined",
        id="runs-and-points",
    ),  # fmt: skip
    pytest.param(
        ["report", "{plant}", "--data", "{run}", "--point", "a", "2031-05-04 10:00"],
        r"--point: expected 3 arguments",
        id="point-without-end",
    ),  # fmt: skip
    pytest.param(
        [
            "report",
            "{plant}",
            "--data",
            "{run}",
            "--point",
            "a",
            "2031-05-04 10:00",
            "2031-05-04 10:02",
            "--window",
            "1h",
        ],
        r"--point states the windows; it cannot be combined with --start, --end or --window",
        id="point-with-window",
    ),  # fmt: skip
    pytest.param(
        ["plan", "{plant}", "--runs", "0"],
        r"--runs: must be a whole number of runs >= 1",
        id="plan-zero-runs",
    ),
    pytest.param(
        ["monitor", *_DEMO, "--every", "1min", "--out", "{tmp}/m1"],
        r"m1: no window of the run gave a result: 0 failed and \d+ skipped",
        id="monitor-no-window-succeeded",
    ),
]


@pytest.mark.parametrize("template, fragment", USER_ERRORS)
def test_user_error_is_one_line_exit_2(files, capsys, template, fragment):
    import re

    status = run_main(_args(template, files))
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert status == 2
    assert "Traceback" not in err
    # progress lines ("[  0.1 s] ...") may precede the error; the error is one line
    errors = [ln for ln in lines if ln.startswith("perftest:")]
    assert len(errors) == 1, err
    assert errors[0].startswith("perftest: error: "), err
    assert re.search(fragment, errors[0]), errors[0]


def run_main(argv) -> int:
    """Exit status of ``perftest argv``: argparse's own errors leave by SystemExit(2)."""
    try:
        return main(argv)
    except SystemExit as exc:
        return exc.code


def _boom(*args, **kwargs):
    raise RuntimeError("simulated fault in a stage")


def test_internal_error_exit_1_with_hint(files, capsys, monkeypatch):
    import perftest.demo

    monkeypatch.setattr(perftest.demo, "run_pipeline", _boom)
    monkeypatch.delenv("PERFTEST_DEBUG", raising=False)
    args = ["report", str(files["plant"]), "--data", str(files["run"]), "--json", "x.json"]
    status = main(args)
    err = capsys.readouterr().err
    assert status == 1
    assert "Traceback" not in err
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1
    assert lines[0].startswith("perftest: internal error: RuntimeError: simulated fault")
    assert "please report it" in lines[0]
    assert "perftest report" in lines[0]  # the command, to report with
    assert "--debug" in lines[0]


@pytest.mark.parametrize("how", ["flag", "env"])
def test_debug_shows_traceback(files, capsys, monkeypatch, how):
    import perftest.demo

    monkeypatch.setattr(perftest.demo, "run_pipeline", _boom)
    args = ["report", str(files["plant"]), "--data", str(files["run"]), "--json", "x.json"]
    if how == "flag":
        monkeypatch.delenv("PERFTEST_DEBUG", raising=False)
        args.append("--debug")
    else:
        monkeypatch.setenv("PERFTEST_DEBUG", "1")
    status = main(args)
    err = capsys.readouterr().err
    assert status == 1
    assert "Traceback" in err and "RuntimeError: simulated fault" in err


def test_user_error_through_the_console_script(files):
    # the installed entry point, in a fresh interpreter: no traceback leaks from imports
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    env.pop("PERFTEST_DEBUG", None)
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "perftest.cli",
            "report",
            "-q",
            str(files["bad_toml"]),
            "--data",
            str(files["run"]),
            "--json",
            str(files["tmp"] / "s.json"),
        ],
        capture_output=True,
        text=True,
        env=env,
        timeout=120,
    )
    assert proc.returncode == 2
    assert proc.stderr.count("\n") == 1
    assert proc.stderr.startswith("perftest: error: ")
    assert "Traceback" not in proc.stderr


# --------------------------------------------------------------------------- outputs
# A failed write must leave the previous good output as it was, and name the file.


def _env(**extra) -> dict:
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", PYTHONDONTWRITEBYTECODE="1", **extra)
    env.pop("PERFTEST_DEBUG", None)
    return env


@pytest.mark.skipif(sys.platform == "win32", reason="resource.setrlimit is POSIX")
def test_write_past_the_file_size_limit_keeps_the_previous_output(tmp_path):
    import resource

    previous = "# the previous, good plan\n"
    target = write_text(tmp_path, "plan.md", previous)
    # 2000 bytes: far below the plan's Markdown (tens of kB), far above anything the
    # interpreter writes before the plan (nothing, with PYTHONDONTWRITEBYTECODE).
    limit = 2000

    def small_files():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    proc = subprocess.run(
        [sys.executable, "-m", "perftest.cli", "plan", str(DEMO / "plant.toml"), "--no-what-if",
         "--markdown", str(target)],
        capture_output=True, text=True, env=_env(), timeout=300, preexec_fn=small_files,
    )  # fmt: skip
    assert proc.returncode == 2, proc.stderr
    errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("perftest:")]
    assert len(errors) == 1 and "Traceback" not in proc.stderr, proc.stderr
    assert errors[0].startswith(f"perftest: error: {target}: cannot write: File too large")
    assert "previous file was left as it was" in errors[0]
    assert target.read_text(encoding="utf-8") == previous
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plan.md"]  # no temporary left


def test_failed_rename_keeps_every_previous_report(files, capsys, monkeypatch):
    import errno

    import perftest.report.output as output

    def disk_full(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device", str(dst))

    monkeypatch.setattr(output.os, "replace", disk_full)
    target = write_text(files["tmp"], "s.json", '{"previous": true}\n')
    args = ["report", *_args(_DEMO, files), "--json", str(target)]
    assert run_main(args) == 2
    err = capsys.readouterr().err
    assert f"perftest: error: {target}: cannot write: No space left on device." in err
    assert target.read_text(encoding="utf-8") == '{"previous": true}\n'
    assert not list(files["tmp"].glob(".s.json.*"))


# --------------------------------------------------------------------------- monitor


def _monitor_args(out) -> list:
    return ["monitor", str(DEMO / "plant.toml"), "--data", str(DEMO / "historian.csv"),
            "--data", str(DEMO / "logger.csv"), "--every", "2h", "--out", str(out), "-q",
            "--no-figures"]  # fmt: skip


def _hold_lock(folder):
    """A separate process holding the folder's lock, as a running monitor job does."""
    code = (
        "import sys, time; from perftest.scale.store import StoreLock; "
        "lock = StoreLock(sys.argv[1], job='perftest monitor').acquire(); "
        "print('held', flush=True); "
        "time.sleep(120)"
    )
    proc = subprocess.Popen([sys.executable, "-c", code, str(folder)], stdout=subprocess.PIPE,
                            text=True, env=_env())  # fmt: skip
    assert proc.stdout.readline().strip() == "held"
    return proc


def test_second_monitor_job_on_one_folder_is_refused(tmp_path, capsys):
    out = tmp_path / "trend"
    holder = _hold_lock(out)
    try:
        assert run_main(_monitor_args(out)) == 2
    finally:
        holder.kill()
        holder.wait()
        holder.stdout.close()  # the pipe too: no ResourceWarning later
    line = capsys.readouterr().err.strip()
    assert line.startswith(f"perftest: error: {out}: the folder is in use by perftest monitor")
    assert f"process {holder.pid} on host" in line
    assert not (out / "windows.csv").exists()


def test_lock_of_a_killed_job_is_accepted(tmp_path, capsys):
    # an operating-system lock goes with its process: no stale lock to clear by hand
    out = tmp_path / "trend"
    holder = _hold_lock(out)
    holder.kill()
    holder.wait()
    holder.stdout.close()  # the pipe too: no ResourceWarning later
    assert run_main(_monitor_args(out)) == 0, capsys.readouterr().err
    assert (out / "windows.csv").is_file()


def test_corrupt_part_file_of_the_store_is_named(tmp_path, capsys):
    out = tmp_path / "trend"
    assert run_main(_monitor_args(out)) == 0
    part = sorted((out / "windows.parquet").glob("part-*.parquet"))[0]
    part.write_bytes(part.read_bytes()[:100])  # a job killed while copying the folder
    capsys.readouterr()
    assert run_main(_monitor_args(out)) == 2
    line = capsys.readouterr().err.strip()
    assert line.startswith(f"perftest: error: {part}: this part file of the window store")
    assert "Delete it" in line and "--no-resume" in line
    assert run_main([*_monitor_args(out), "--no-resume"]) == 0  # the way out it names


_SLOW_DRIVER = """
import os, sys, time
import perftest.scale.many as many

real = many._chunk_rows

def slow(*args, **kwargs):  # pickled by value: runs in the workers
    open(os.environ["PERFTEST_TEST_STARTED"], "w").close()
    time.sleep(60)
    return real(*args, **kwargs)

many._chunk_rows = slow
from perftest.cli import main
sys.exit(main(sys.argv[1:]))
"""


@pytest.mark.skipif(sys.platform == "win32", reason="process groups and SIGINT are POSIX")
def test_ctrl_c_on_the_dask_engine_is_one_line(tmp_path):
    import signal
    import time

    pytest.importorskip("distributed")
    started = tmp_path / "started"
    args = [*_monitor_args(tmp_path / "trend"), "--engine", "dask", "--workers", "1",
            "--every", "30min"]  # fmt: skip
    proc = subprocess.Popen(
        [sys.executable, "-c", _SLOW_DRIVER, *args],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        env=_env(PERFTEST_TEST_STARTED=str(started)), start_new_session=True,
        # a shell that started the tests in the background ignores SIGINT: undo that
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL),
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 120
        while not started.exists() and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.2)
        assert started.exists(), proc.communicate(timeout=60)
        os.killpg(proc.pid, signal.SIGINT)  # what the terminal does on Ctrl-C
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 130
    assert err.splitlines() == ["perftest: error: interrupted"], err


# --------------------------------------------------------------------------- report


def test_report_writes_what_was_computed_when_evaluation_fails(tmp_path, capsys, monkeypatch):
    import functools
    import json

    import perftest.evaluation.results as results
    from perftest.errors import PlantFileError

    @functools.wraps(results.evaluate)  # the same signature: the audit reads its defaults
    def fails(*args, **kwargs):
        raise PlantFileError("plant.toml, line 7, key 'performance.heat_input': simulated.")

    monkeypatch.setattr(results, "evaluate", fails)
    out = tmp_path / "rep"
    assert run_main(["report", *_args(_DEMO, {"demo_plant": DEMO / "plant.toml",
                     "historian": DEMO / "historian.csv", "logger": DEMO / "logger.csv"}),
                     "--out", str(out)]) == 2  # fmt: skip
    captured = capsys.readouterr()
    line = captured.err.strip()
    assert line.startswith("perftest: error: evaluate failed: plant.toml, line 7, key "
                           "'performance.heat_input': simulated.")  # fmt: skip
    assert str(out / "summary.json") in line and str(out / "report.md") in line
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    # the stages before the failure are all there
    assert summary["global_test"]["dof"] > 0
    assert len(summary["measurements"]) > 10
    assert all(m["reconciled"] is not None for m in summary["measurements"])
    assert all(r["value"] is None for r in summary["results"].values())
    report = (out / "report.md").read_text(encoding="utf-8")
    assert "evaluate failed: plant.toml, line 7" in report and "## Reconciliation" in report
    assert "global test" in captured.out  # the terminal summary of what was computed


def test_non_convergence_suggests_what_a_plant_file_user_can_do(files, capsys, monkeypatch):
    import functools

    import perftest.balance.nonlinear as nonlinear

    # the real engine, stopped after one iteration: it speaks of its own options
    monkeypatch.setattr(
        nonlinear,
        "reconcile_nonlinear",
        functools.partial(nonlinear.reconcile_nonlinear, max_iter=1),
    )
    args = ["report", *_args(_DEMO, files)]
    assert run_main(args) == 2
    line = capsys.readouterr().err.strip()
    assert line.startswith("perftest: error: The balances of the plant model did not close")
    assert "max_iter" not in line and "'y0'" not in line
    assert "steadier window" in line


# --------------------------------------------------------------------------- accepted


def test_bare_seconds_are_accepted(tmp_path, capsys):
    import json

    target = tmp_path / "plan.json"
    argv = ["plan", str(DEMO / "plant.toml"), "--no-what-if", "--duration", "7200",
            "--interval", "60", "--json", str(target)]  # fmt: skip
    assert run_main(argv) == 0, capsys.readouterr().err
    plan = json.loads(target.read_text(encoding="utf-8"))
    assert plan["duration_s"] == 7200.0
    # 7200 s at one sample every 60 s: 120 samples per tag
    assert {i["n_samples"] for i in plan["instruments"]} == {120}


def test_start_with_window_length_is_accepted(tmp_path, capsys):
    import json

    target = tmp_path / "s.json"
    argv = ["report", *_args(_DEMO, {"demo_plant": DEMO / "plant.toml",
            "historian": DEMO / "historian.csv", "logger": DEMO / "logger.csv"}),
            "--start", "2026-05-14 10:00", "--window", "30min", "--json", str(target)]  # fmt: skip
    assert run_main(argv) == 0, capsys.readouterr().err
    window = json.loads(target.read_text(encoding="utf-8"))["window"]
    assert window["start"].startswith("2026-05-14T10:00")
    # samples in [10:00, 10:30): the last logger sample is 10:29:55 at most
    assert "2026-05-14T10:29" in window["end"] or "2026-05-14T10:30" in window["end"]
