"""The plant model keeps the property calls of recent points (PlantModel._properties).

Outside checks: the Jacobian is compared with central finite differences of the
residual (an independent computation: only residual calls, at points the model has
not seen), and the residual with a direct call of the property layer's h(p, T)
(perftest.thermo through plant.states) for each state row.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np

import perftest
from perftest.plant import build_model
from perftest.plant import states as thermo
from perftest.plant.guess import initial_guess

DEMO = Path(__file__).resolve().parents[2] / "sample_data" / "brackenfold"


def _model_and_point():
    plant = perftest.load_plant(DEMO / "plant.toml")
    model = build_model(plant)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = perftest.read_run([DEMO / "historian.csv", DEMO / "logger.csv"], plant)
        meas = run.average()
    values = dict(zip(meas.tags, meas.value, strict=True))
    x = np.array([values[t] for t in model.measured])
    return model, x, initial_guess(model, x)


def test_jacobian_after_residuals_elsewhere_matches_finite_differences():
    model, x, y = _model_and_point()
    x2, y2 = x * (1 + 1e-3), y * (1 - 1e-3)
    # fill the kept sets with other points first, then come back to (x, y)
    for _ in range(6):
        model.residual(x2, y2)
        x2, y2 = x2 * (1 + 1e-4), y2 * (1 + 1e-4)
    f = model.residual(x, y)
    Jx, Jy = model.jacobian(x, y)
    # nothing kept yet: build_model caches the model on its plant, so a fresh model
    # needs a freshly loaded plant
    fresh = build_model(perftest.load_plant(DEMO / "plant.toml"))
    assert fresh is not model
    np.testing.assert_array_equal(f, fresh.residual(x, y))
    # central differences on a fresh model, step 1e-6 relative: truncation ~1e-12
    # and rounding ~1e-10 of the derivative's size.  The model's own dh/dp at fixed
    # quality is a one-sided difference (plant.states._DP_REL = 1e-6) good to a few
    # 1e-5 of the column's size: 1e-4.  A Jacobian taken at one of the other points
    # (1e-3 away) would be off by ~1e-3 in the m h terms.
    J = np.hstack([Jx.toarray(), Jy.toarray()])
    v = np.concatenate([x, y])
    n = x.size
    for j in range(v.size):
        h = 1e-6 * max(abs(v[j]), 1.0)
        vp, vm = v.copy(), v.copy()
        vp[j] += h
        vm[j] -= h
        col = (fresh.residual(vp[:n], vp[n:]) - fresh.residual(vm[:n], vm[n:])) / (vp[j] - vm[j])
        scale = np.abs(J[:, j]).max() + 1e-12
        np.testing.assert_allclose(J[:, j], col, rtol=0, atol=1e-4 * scale, err_msg=f"column {j}")


def test_state_rows_equal_the_property_layer():
    model, x, y = _model_and_point()
    model.residual(x * 1.001, y)  # another point kept first
    v = model.slot_values(x, y)
    r = model.imbalance(x, y)
    for fl, ph, rows, sids, p, T, _ in model._state_groups:
        h = thermo.h_pT(fl, ph, v[p], v[T], sids)[0]
        # row = (linear part: the stream's h slot) - h(p, T): the h slot minus the
        # property layer's value, exactly (the same function, the same inputs)
        hslot = np.array([v[model.index[f"{s}.enthalpy"]] for s in sids])
        np.testing.assert_array_equal(r[rows], hslot - h)
