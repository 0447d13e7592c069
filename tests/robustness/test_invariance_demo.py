"""The demo's reconciled values and results do not depend on the order of tags and
streams in the plant file, the order of columns in the run file, or the unit a tag
is logged in.

The reference is the demo itself, evaluated as shipped; each variant describes the
same plant and the same readings differently.  A weighted least-squares estimate is
invariant to the order of its variables and to a change of their units (see
test_properties_based.py); here that is checked through the whole path from files
to results.  Fahrenheit: t/degF = 1.8 t/degC + 32 and a temperature difference of
1 degC is 1.8 degF, exact by definition (NIST SP 811, section B.8).
"""

from __future__ import annotations

import re
import shutil
import warnings

import numpy as np
import pandas as pd
import pytest

import perftest

from .conftest import DEMO

FILES = ("historian.csv", "logger.csv")


def evaluate(folder):
    plant = perftest.load_plant(folder / "plant.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([folder / f for f in FILES], plant)
        window = run.steadiest_window("2h").screen_outliers(alpha=0.01)
        m = window.average()
        rec = perftest.reconcile(plant, m, eliminate=True)
        perf = perftest.evaluate(plant, rec, monte_carlo=False)
    frame = rec.to_frame(units="si").set_index("tag")
    return {
        "window": (m.start, m.end),
        "reconciled": frame[["reconciled", "u_reconciled"]].sort_index(),
        "eliminated": [e.tag for e in rec.eliminated],
        "chi2": rec.global_test["chi2"],
        "results": perf.results[["value", "u"]].sort_index(),
    }


@pytest.fixture(scope="module")
def reference():
    return evaluate(DEMO)


def _copy_demo(tmp_path):
    for f in ("plant.toml", *FILES):
        shutil.copy(DEMO / f, tmp_path / f)
    return tmp_path


def _blocks(text: str) -> list[str]:
    """Top-level TOML tables as text blocks (each from its [header] to the next)."""
    parts = re.split(r"(?m)^(?=\[)", text)
    return [p for p in parts if p]


def _reorder_plant(text: str) -> str:
    blocks = _blocks(text)
    tags = [i for i, b in enumerate(blocks) if b.startswith("[tags.")]
    streams = [i for i, b in enumerate(blocks) if b.startswith("[streams.")]
    units = [i for i, b in enumerate(blocks) if b.startswith("[units.")]
    out = list(blocks)
    for group in (tags, streams, units):
        for i, j in zip(group, reversed(group), strict=True):
            out[i] = blocks[j].rstrip("\n") + "\n\n"
    return "".join(out)


def _permute_columns(path, seed: int) -> None:
    lines = path.read_text(encoding="utf-8").splitlines()
    sep = ";" if ";" in lines[0] else ","
    rows = [ln.split(sep) for ln in lines]
    n = len(rows[0])
    order = [0] + list(np.random.default_rng(seed).permutation(np.arange(1, n)))
    path.write_text("\n".join(sep.join(r[k] for k in order) for r in rows) + "\n", encoding="utf-8")


def assert_same(a, b, rtol):
    assert a["window"] == b["window"]
    assert a["eliminated"] == b["eliminated"]
    assert a["chi2"] == pytest.approx(b["chi2"], rel=rtol)
    pd.testing.assert_index_equal(a["reconciled"].index, b["reconciled"].index)
    np.testing.assert_allclose(
        a["reconciled"].to_numpy(float), b["reconciled"].to_numpy(float), rtol=rtol
    )
    pd.testing.assert_index_equal(a["results"].index, b["results"].index)
    np.testing.assert_allclose(
        a["results"].to_numpy(float), b["results"].to_numpy(float), rtol=rtol, equal_nan=True
    )


def test_order_of_tags_streams_units_and_columns(tmp_path, reference):
    folder = _copy_demo(tmp_path)
    plant = folder / "plant.toml"
    text = plant.read_text(encoding="utf-8")
    reordered = _reorder_plant(text)

    def body(t):
        return sorted(ln for ln in t.splitlines() if ln.strip())

    assert reordered != text and body(reordered) == body(text)
    plant.write_text(reordered, encoding="utf-8")
    _permute_columns(folder / "historian.csv", seed=3)
    _permute_columns(folder / "logger.csv", seed=4)
    # the same sums in another order: equal to round-off (1e-9 relative is ~1e7 times
    # double-precision epsilon, room for the iterative nonlinear solve)
    assert_same(evaluate(folder), reference, rtol=1e-9)


def test_temperature_logged_in_fahrenheit(tmp_path, reference):
    folder = _copy_demo(tmp_path)
    hist = folder / "historian.csv"
    lines = hist.read_text(encoding="utf-8").splitlines()
    head = lines[0].split(",")
    k = head.index("TT-101")
    units = lines[1].split(",")
    assert units[k] == "degC"
    units[k] = "degF"
    out = [lines[0], ",".join(units)]
    for ln in lines[2:]:
        cells = ln.split(",")
        try:
            cells[k] = repr(float(cells[k]) * 1.8 + 32.0)
        except ValueError:
            pass  # a bad cell stays bad: it is masked in both files
        out.append(",".join(cells))
    hist.write_text("\n".join(out) + "\n", encoding="utf-8")

    plant = folder / "plant.toml"
    text = plant.read_text(encoding="utf-8")
    block = re.search(r'(?s)\[tags\."TT-101"\].*?(?=\n\[)', text).group(0)
    new = block.replace('unit = "degC"', 'unit = "degF"')
    # 1.5 degC and 2.0 degC as differences: x 1.8
    new = new.replace('value = 1.5, kind = "absolute"', 'value = 2.7, kind = "absolute"')
    new = new.replace('value = 2.0, kind = "absolute"', 'value = 3.6, kind = "absolute"')
    assert new.count("degF") == 1 and "2.7" in new and "3.6" in new
    plant.write_text(text.replace(block, new), encoding="utf-8")

    variant = evaluate(folder)
    # readings written with 17 significant digits and converted back: round-off of a
    # few ulp, amplified by the iterative solve; 1e-8 relative
    assert_same(variant, reference, rtol=1e-8)
