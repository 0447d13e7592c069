"""The ``perftest`` command: help, version, exit codes and one-line errors."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from perftest import __version__
from perftest.cli import main

DATA = Path(__file__).resolve().parents[1] / "sample_data" / "brackenfold"


def _one_error_line(err: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, err
    assert lines[0].startswith("perftest: error: "), err
    assert "Traceback" not in err
    return lines[0]


def test_version(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    assert __version__ in capsys.readouterr().out


def test_help_explains_commands_with_an_example(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    for word in ("demo", "report", "examples:", "--data", "perftest demo --out"):
        assert word in out
    with pytest.raises(SystemExit):
        main(["report", "--help"])
    out = capsys.readouterr().out
    assert "--start" in out and "--window" in out and "--json" in out


def test_missing_plant_file_is_one_line_exit_2(tmp_path, capsys):
    code = main(["report", str(tmp_path / "nope.toml"), "--data", "x.csv", "--json", "o.json"])
    assert code == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "nope.toml" in line and "not found" in line


def test_unknown_option_is_one_line_exit_2(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["report", "p.toml", "--data", "r.csv", "--bogus"])
    assert exc.value.code == 2
    _one_error_line(capsys.readouterr().err)


def test_report_without_an_output_prints_the_summary(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code = main(
        ["report", str(DATA / "plant.toml"), "--data", str(DATA / "historian.csv"), "--data",
         str(DATA / "logger.csv"), "--start", "2026-05-14 10:00", "--end", "2026-05-14 12:00",
         "--no-figures", "-q"]
    )  # fmt: skip
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert captured.err == ""
    for label in ("global test", "net power", "efficiency (net)", "heat rate", "guarantee"):
        assert label in captured.out
    assert "wrote" not in captured.out
    assert list(tmp_path.iterdir()) == []  # printed only, nothing written


def _options(parser):
    import argparse

    for action in parser._actions:
        if isinstance(action, argparse._SubParsersAction):
            for name, sub in action.choices.items():
                yield from ((name, a) for a in sub._actions)


def test_every_option_says_what_it_does_and_its_default():
    from perftest.cli import build_parser

    missing = []
    for command, action in _options(build_parser()):
        if not action.option_strings or "-h" in action.option_strings:
            continue
        text = action.help or ""
        if "default" not in text and "required" not in text:
            missing.append(f"{command} {action.option_strings[-1]}: {text!r}")
    assert missing == []


@pytest.mark.parametrize(
    ("plant_text", "needle"),
    [
        ("[site\nname = 'x'\n", "plant.toml"),  # broken TOML: the file is named
        ('[site]\nname = "x"\n[tags.A]\nunit = "furlongs/fortnight"\n', "furlongs"),
    ],
)
def test_bad_plant_file_through_the_console_script(tmp_path, plant_text, needle):
    plant = tmp_path / "plant.toml"
    plant.write_text(plant_text, encoding="utf-8")
    run = tmp_path / "run.csv"
    run.write_text("time,A\n2026-01-01 00:00,1\n", encoding="utf-8")
    exe = Path(sys.executable).with_name("perftest")
    cmd = [str(exe)] if exe.exists() else [sys.executable, "-m", "perftest.cli"]
    proc = subprocess.run(
        [
            *cmd,
            "report",
            str(plant),
            "--data",
            str(run),
            "--json",
            str(tmp_path / "s.json"),
            "--quiet",
        ],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2, proc.stderr
    line = _one_error_line(proc.stderr)
    assert needle in line
    # Without --quiet the progress line comes first and the error is still one line.
    proc = subprocess.run(
        [*cmd, "report", str(plant), "--data", str(run), "--json", str(tmp_path / "s.json")],
        capture_output=True,
        text=True,
        timeout=120,
    )
    errors = [ln for ln in proc.stderr.splitlines() if ln.startswith("perftest: error:")]
    assert proc.returncode == 2 and errors == [line] and "Traceback" not in proc.stderr


def test_bad_run_file_is_one_line_exit_2(tmp_path, capsys):
    run = tmp_path / "garbage.csv"
    run.write_bytes(b"\x00\x01\x02 not a table\n")
    code = main(
        [
            "report",
            str(DATA / "plant.toml"),
            "--data",
            str(run),
            "--json",
            str(tmp_path / "s.json"),
            "--quiet",
        ]
    )
    assert code == 2
    _one_error_line(capsys.readouterr().err)


def test_report_command_end_to_end(tmp_path, capsys):
    out = tmp_path / "summary.json"
    md = tmp_path / "report.md"
    code = main(
        [
            "report",
            str(DATA / "plant.toml"),
            "--data",
            str(DATA / "historian.csv"),
            "--data",
            str(DATA / "logger.csv"),
            "--start",
            "2026-05-14 10:00",
            "--end",
            "2026-05-14 12:00",
            "--json",
            str(out),
            "--markdown",
            str(md),
            "--no-figures",
        ]
    )
    captured = capsys.readouterr()
    assert code == 0, captured.err
    summary = json.loads(out.read_text(encoding="utf-8"))
    assert {"global_test", "measurements", "results", "guarantees"} <= set(summary)
    assert summary["window"]["start"].startswith("2026-05-14T10:00")
    assert "net power" in captured.out and "time" in captured.out
    # progress lines go to stderr, one per stage, with the elapsed time
    assert "reconcile ..." in captured.err
    assert md.read_text(encoding="utf-8").startswith("# ")


# --------------------------------------------------------------------------- plan


def test_plan_command_writes_json_and_markdown(tmp_path, capsys):
    js, md = tmp_path / "plan.json", tmp_path / "plan.md"
    code = main(
        [
            "plan",
            str(DATA / "plant.toml"),
            "--duration",
            "1h",
            "--upgrade-factor",
            "0.25",
            "--json",
            str(js),
            "--markdown",
            str(md),
        ]
    )
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "corrected_heat_rate" in captured.out and "best single upgrade" in captured.out
    plan = json.loads(js.read_text(encoding="utf-8"))
    assert plan["duration_s"] == 3600.0 and plan["upgrade_factor"] == 0.25
    assert {"corrected_net_power", "corrected_heat_rate"} <= set(plan["results"])
    row = plan["results"]["corrected_heat_rate"]
    assert row["U95_with"] <= row["U95_without"] * (1 + 1e-12)
    text = md.read_text(encoding="utf-8")
    assert text.startswith("# ") and "Upgrading one instrument" in text
    assert "does not replace" in text  # the caution is carried


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--duration", "soon"], "argument --duration: must be a duration such as '2h'"),
        (["--upgrade-factor", "-2"], "'upgrade_factor' parameter of plan"),
    ],
)
def test_plan_bad_arguments_are_one_line_exit_2(capsys, args, needle):
    try:
        code = main(["plan", str(DATA / "plant.toml"), "--no-what-if", *args])
    except SystemExit as exc:  # argparse's own refusals
        code = exc.code
    assert code == 2
    assert needle in _one_error_line(capsys.readouterr().err)


def test_plan_without_design_table_names_the_file(tmp_path, capsys):
    text = (DATA / "plant.toml").read_text(encoding="utf-8")
    cut = text.index("# ---- design point")
    path = tmp_path / "plant.toml"
    path.write_text(text[:cut], encoding="utf-8")
    assert main(["plan", str(path)]) == 2
    line = _one_error_line(capsys.readouterr().err)
    assert "plant.toml" in line and "[design]" in line
    assert main(["plan", str(tmp_path / "missing.toml")]) == 2
    assert "not found" in _one_error_line(capsys.readouterr().err)


def test_weighted_part_load_lines_are_in_display_units():
    """The weighted figures of a load-point test print in the units of the
    single-window lines (kJ/kWh, %), not as bare SI ratios."""
    import io
    from types import SimpleNamespace

    import pandas as pd

    from perftest.cli import _test_lines

    results = pd.DataFrame(
        {"value": [3.0, 0.25, 5.0], "u": [0.01, 0.001, 0.05], "U95": [0.02, 0.002, 0.1],
         "unit": ["J/J", "1", "1"]},
        index=["weighted_heat_rate", "weighted_first_law_efficiency", "weighted_cop"],
    )  # fmt: skip
    test = SimpleNamespace(mode="points", windows=[], results=results)
    buf = io.StringIO()
    assert _test_lines(test, buf.write) is None
    lines = {ln.split()[0]: ln for ln in buf.getvalue().splitlines()}
    # 1 J/J = 3600 kJ/kWh (1 kWh = 3600 kJ by definition of the kilowatt hour)
    assert "10800 kJ/kWh +- 72 kJ/kWh" in lines["weighted_heat_rate"]
    assert "25.00 % +- 0.20 %" in lines["weighted_first_law_efficiency"]
    # a COP is a plain ratio: no unit and no stray spaces
    assert "5.00 +- 0.10 (U95)" in lines["weighted_cop"]


def test_each_run_shows_its_own_reconciliation():
    """A test of several runs prints each run's global test and dropped
    instruments under that run, not the first run's alone as if for the test."""
    import io
    from types import SimpleNamespace

    import pandas as pd

    from perftest.cli import _summary

    def rec(p, tag):
        return SimpleNamespace(
            global_test={"chi2": 1.0, "dof": 2, "p_value": p, "passed": p >= 0.05},
            eliminated=[SimpleNamespace(tag=tag, z=-4.5)],
            to_frame=lambda units: pd.DataFrame({"tag": [tag], "suspect": [True]}),
        )

    wins = [
        SimpleNamespace(label="run 1", start=pd.Timestamp("2031-05-04 09:00"),
                        end=pd.Timestamp("2031-05-04 10:00"), reconciliation=rec(0.8, "FT-1")),
        SimpleNamespace(label="run 2", start=pd.Timestamp("2031-05-04 10:00"),
                        end=pd.Timestamp("2031-05-04 11:00"), reconciliation=rec(0.01, "FT-2")),
    ]  # fmt: skip
    empty = pd.DataFrame(columns=["value", "U95", "unit"])
    test = SimpleNamespace(
        mode="runs", windows=wins, results=empty, guarantees=pd.DataFrame(columns=["quantity"]),
        repeatability=pd.DataFrame(columns=["passed"]),
    )  # fmt: skip
    outcome = SimpleNamespace(
        performance=None, reconciliation=wins[0].reconciliation, plant=None,
        measurements=None, test=test, missing=[], written={}, timings={},
    )  # fmt: skip
    buf = io.StringIO()
    _summary(outcome, buf)
    lines = buf.getvalue().splitlines()
    at: dict = {}
    for i, ln in enumerate(lines):
        at.setdefault(" ".join(ln.split()[:2]), i)  # the first line of each label
    assert at["run 1"] < at["global test"] < at["run 2"]
    run2 = "\n".join(lines[at["run 2"] :])
    assert "p = 0.010 (failed)" in run2
    assert any(ln.split() == ["dropped", "FT-2", "(|z|", "=", "4.50)"] for ln in run2.splitlines())
    # the values of the indented lines start in the column of the run's times
    assert lines[at["global test"]].index("chi2") == lines[at["run 1"]].index("2031")
    assert "FT-2" not in "\n".join(lines[: at["run 2"]])
    assert not any(ln.lstrip().startswith("window ") for ln in lines)
