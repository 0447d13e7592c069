"""Nothing lost: the audit record travels with the result into summary.json and the
reports, and its entries agree with independent counts from the input files.

Independent references: hashlib (SHA-256, FIPS 180-4) over the file bytes, os.stat
for sizes, the raw CSV text for the bad cells, importlib.metadata for versions.
"""

from __future__ import annotations

import csv
import hashlib
import json
import warnings
from importlib import metadata

import numpy as np
import pytest

import perftest
from perftest.demo import run_demo
from perftest.report.audit import build_audit, file_fingerprint, normalise_reason

from .conftest import DEMO, PLANT, RUN, write_text


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        outcome = run_demo(out, figures=False)
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    return outcome, summary, out


def test_summary_carries_the_audit(demo):
    _, summary, _ = demo
    audit = summary["audit"]
    for key in (
        "created",
        "masked_samples",
        "outliers_rejected",
        "eliminated",
        "unit_conversions",
        "input_files",
        "versions",
        "options",
    ):
        assert key in audit


def test_input_file_hashes_and_sizes(demo):
    _, summary, _ = demo
    files = {f["name"]: f for f in summary["audit"]["input_files"]}
    assert set(files) == {"plant.toml", "historian.csv", "logger.csv"}
    for name, f in files.items():
        data = (DEMO / name).read_bytes()
        assert f["sha256"] == hashlib.sha256(data).hexdigest()
        assert f["size"] == (DEMO / name).stat().st_size
        assert f["note"] == ""
    assert files["plant.toml"]["role"] == "plant"


def test_masked_samples_agree_with_the_raw_file(demo):
    _, summary, _ = demo
    # count the sentinel cells of the historian file straight from its text
    with open(DEMO / "historian.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    head = rows[0]
    body = rows[2:]  # line 2 is the units row
    counts = {}
    for tag in head[1:]:
        k = head.index(tag)
        cells = [r[k].strip() for r in body]
        counts[tag] = {
            "blank cell": sum(c == "" for c in cells),
            "sentinel -9999": sum(c in ("-9999", "-9999.0") for c in cells),
        }
    masked = summary["audit"]["masked_samples"]

    def audit_count(tag, prefix):
        return sum(
            m["in_run"] for m in masked if m["tag"] == tag and m["reason"].startswith(prefix)
        )

    checked = 0
    for tag, c in counts.items():
        if c["blank cell"]:
            assert audit_count(tag, "blank cell") == c["blank cell"]
            checked += 1
        if c["sentinel -9999"]:
            assert audit_count(tag, "sentinel value -9999") == c["sentinel -9999"]
            checked += 1
    assert checked >= 2  # the demo file holds blank and sentinel cells (see its README)


def test_outliers_and_eliminations_agree_with_the_pipeline(demo):
    outcome, summary, _ = demo
    audit = summary["audit"]
    ex = outcome.window_run.exclusions
    outl = ex[ex["reason"].astype(str).str.startswith("outlier")]
    assert audit["outliers_rejected"] == {
        str(t): int(n) for t, n in outl["tag"].value_counts().items()
    }
    steps = [e.tag for e in outcome.reconciliation.eliminated]
    assert [e["tag"] for e in audit["eliminated"]] == steps
    for e, ref in zip(audit["eliminated"], outcome.reconciliation.eliminated, strict=True):
        assert e["z"] == pytest.approx(ref.z) and e["dof"] == ref.dof


def test_unit_conversions_name_logged_and_si_units(demo):
    outcome, summary, _ = demo
    from perftest.units import si_unit

    conv = {c["tag"]: c for c in summary["audit"]["unit_conversions"]}
    plant = outcome.plant
    for tag, spec in plant.tags.items():
        assert conv[tag]["unit"] == spec.unit
        assert conv[tag]["si_unit"] == si_unit(spec.quantity)
    # e.g. a steam pressure logged in barg goes to Pa (absolute), a flow in t/h to kg/s
    assert conv["PT-101"]["unit"] == "barg" and conv["PT-101"]["si_unit"] == "Pa"
    assert conv["FT-101"]["si_unit"] == "kg/s"


def test_versions_and_options(demo):
    _, summary, _ = demo
    v = summary["audit"]["versions"]
    assert v["numpy"] == np.__version__
    assert v["perftest"] == metadata.version("perftest")
    for name in ("scipy", "pandas", "CoolProp", "pint", "uncertainties", "python"):
        assert v[name]
    opts = summary["audit"]["options"]
    assert opts["outlier_alpha"] == 0.01 and opts["serial_elimination"] is True
    assert isinstance(opts["monte_carlo_seed"], int)


def test_reports_show_the_audit(demo):
    _, summary, out = demo
    md = (out / "report.md").read_text(encoding="utf-8")
    page = (out / "report.html").read_text(encoding="utf-8")
    for f in summary["audit"]["input_files"]:
        assert f["sha256"] in md and f["sha256"] in page
    assert "## Audit record" in md and "<h2>Audit record</h2>" in page


def test_bad_samples_in_a_good_file_are_masked_and_audited(tmp_path):
    rows = RUN.splitlines()
    rows[2] = rows[2].replace("150.3", "oops")  # TT-1 text
    rows[3] = rows[3].replace("10.03", "")  # PT-1 blank
    rows[4] = rows[4].replace("50.2", "-9999")  # FT-1 sentinel (given below)
    path = write_text(tmp_path, "run.csv", "\n".join(rows) + "\n")
    plant = perftest.load_plant(write_text(tmp_path, "plant.toml", PLANT))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run(path, plant, sentinels=[-9999])
    audit = build_audit(plant, run, run).to_dict()
    got = {(m["tag"], m["reason"]): m["in_run"] for m in audit["masked_samples"]}
    assert got == {
        ("TT-1", "text in a numeric cell"): 1,
        ("PT-1", "blank cell"): 1,
        ("FT-1", "sentinel value -9999"): 1,
    }
    assert int(run.mask.to_numpy().sum()) == 3  # and nothing else was masked


def test_changed_file_is_flagged(tmp_path):
    path = write_text(tmp_path, "run.csv", RUN)
    data = path.read_bytes()
    import zlib

    same = file_fingerprint(path, size=len(data), crc32=zlib.crc32(data))
    assert same.note == "" and same.sha256 == hashlib.sha256(data).hexdigest()
    path.write_bytes(data + b"2031-05-04 10:04:00,150.0,10.02,50.2\n")
    changed = file_fingerprint(path, size=len(data), crc32=zlib.crc32(data))
    assert "changed since the import" in changed.note
    gone = file_fingerprint(tmp_path / "none.csv")
    assert gone.sha256 is None and "cannot be read" in gone.note


@pytest.mark.parametrize(
    "reason, kind",
    [
        ("text 'n/a' in a numeric cell (line 17)", "text in a numeric cell"),
        ("blank cell", "blank cell"),
        ("sentinel value -9999", "sentinel value -9999"),
        ("quality flag 'BAD' in column 'Q'", "quality flag 'BAD' in column 'Q'"),
    ],
)
def test_reason_kinds(reason, kind):
    assert normalise_reason(reason) == kind
