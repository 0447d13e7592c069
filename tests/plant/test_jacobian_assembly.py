"""The plant model's Jacobian assembly: a kept plan gives scipy's own COO -> CSR result.

Reference: scipy.sparse's conversion of the model's COO entries (duplicates summed),
computed here independently of the model's plan; and the dense Jacobian against the
sparse one.  The boiler scenario adds the firing-side rows, whose entries join the
pattern.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
import scipy.sparse as sp

import perftest
from perftest.plant import build_model
from perftest.plant.guess import initial_guess

ROOT = Path(__file__).resolve().parents[2]
PLANTS = [
    ROOT / "sample_data" / "brackenfold" / "plant.toml",
    ROOT / "sample_data" / "quellmoor" / "plant.toml",
    ROOT / "sample_data" / "wrenhollow" / "plant.toml",
]


def _start(model, plant_path):
    """A valid point: the bundled scenario's averaged logs."""
    files = sorted(Path(plant_path).parent.glob("*.csv"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([str(f) for f in files], plant=model.plant)
        m = run.average()
    return np.array([m[t].value for t in model.measured])


def _reference(model, x, y):
    """COO entries of the model turned into CSR by scipy (duplicates summed)."""
    _, (r, c, a) = model._evaluate(model.slot_values(x, y), jac=True)
    a = a / model._scale[r]
    m = len(model.rows)
    J = sp.csr_matrix((a, (r, c)), shape=(m, len(model.variables)))
    xs = np.flatnonzero(model._slot_x >= 0)
    ys = np.flatnonzero(model._slot_y >= 0)
    Jx = J[:, xs[np.argsort(model._slot_x[xs])]]
    Jy = J[:, ys[np.argsort(model._slot_y[ys])]]
    return Jx.toarray(), Jy.toarray()


@pytest.mark.parametrize("path", PLANTS, ids=lambda p: p.parent.name + "/" + p.stem)
def test_jacobian_equals_scipy_assembly(path):
    plant = perftest.load_plant(path)
    model = build_model(plant)
    x0 = _start(model, path)
    y0 = initial_guess(model, x0)
    rng = np.random.default_rng(3)
    for _ in range(3):
        x = x0 * (1.0 + 1e-4 * rng.standard_normal(x0.size))
        y = y0 * (1.0 + 1e-4 * rng.standard_normal(y0.size))
        Jx, Jy = model.jacobian(x, y)
        ref_x, ref_y = _reference(model, x, y)
        # the same additions in the same or commuted order: equal to the last bit
        # or within a rounding of the largest entry where three or more entries meet
        assert np.allclose(Jx.toarray(), ref_x, rtol=1e-15, atol=0.0)
        assert np.allclose(Jy.toarray(), ref_y, rtol=1e-15, atol=0.0)
        assert Jx.has_canonical_format and Jy.has_canonical_format
        dx, dy = model.dense_jacobian(x, y)
        assert np.array_equal(dx, Jx.toarray()) and np.array_equal(dy, Jy.toarray())


def test_plan_follows_a_changed_pattern(monkeypatch):
    """A point where the entry pattern differs (an entry more, as a firing-side row may
    add) gets a new plan, not the kept one."""
    plant = perftest.load_plant(PLANTS[0])
    model = build_model(plant).bind(build_model(plant).measured)
    x0 = _start(model, PLANTS[0])
    y0 = initial_guess(model, x0)
    Jx, Jy = model.jacobian(x0, y0)
    original = model._entries

    def one_more(v):
        r, c, a = original(v)
        j = int(model._xs[0])  # a measured variable, in row 0 besides its own entries
        return np.append(r, 0), np.append(c, j), np.append(a, 7.0)

    monkeypatch.setattr(model, "_entries", one_more)
    Jx2, Jy2 = model.jacobian(x0, y0)
    col = int(model._slot_x[model._xs[0]])
    expected = Jx.toarray()
    expected[0, col] += 7.0 / model._scale[0]
    assert np.allclose(Jx2.toarray(), expected, rtol=1e-15, atol=0.0)
    assert np.array_equal(Jy2.toarray(), Jy.toarray())
