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
        "demo_plant": DEMO / "plant.toml",
        "historian": DEMO / "historian.csv",
        "logger": DEMO / "logger.csv",
        "tmp": tmp_path,
    }
    return out


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
        ["report", "{plant}", "--data", "{run}"],
        r"Nothing to write",
        id="nothing-to-write",
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
