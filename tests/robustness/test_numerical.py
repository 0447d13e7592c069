"""Numerical robustness: ill-conditioned covariances, nearly dependent constraints,
zero flows, states near saturation.  Each case must give finite, closed, checked
numbers or a clear PerftestError; never a silent NaN in a reported result.

The independent reference for the linear cases is the least-squares solution in
variables scaled by their uncertainty, z = x / u: minimise |z - z_m|^2 subject to
(A diag(u)) z = b, solved with numpy's SVD pseudo-inverse (numpy.linalg.pinv), a
route that does not share the library's factorisations.
"""

from __future__ import annotations

import json
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

import perftest
from perftest.errors import PerftestError
from perftest.measurements import Measurements
from perftest.properties import get_fluid


def reference_solution(x, u, A, b):
    M = A * u  # A diag(u)
    zm = x / u
    z = zm - np.linalg.pinv(M) @ (M @ zm - b)
    return z * u


def chain(n: int, rng):
    """n streams in series through n-1 nodes (every flow equal): rows x_i - x_{i+1} = 0."""
    A = np.zeros((n - 1, n))
    for i in range(n - 1):
        A[i, i], A[i, i + 1] = 1.0, -1.0
    return A, np.zeros(n - 1)


@pytest.mark.parametrize("seed", range(5))
def test_uncertainties_over_ten_decades(seed):
    rng = np.random.default_rng(seed)
    n = 8
    A, b = chain(n, rng)
    u = 10.0 ** np.linspace(-5.0, 5.0, n)  # 1e-5 .. 1e5: ten orders of magnitude
    rng.shuffle(u)
    x = 50.0 + rng.normal(size=n) * np.minimum(u, 1.0)
    r = perftest.reconcile_linear(x, np.diag(u**2), A, b=b)
    assert np.all(np.isfinite(r.x)) and np.all(np.isfinite(r.x_cov))
    assert np.isfinite(r.chi2)
    # closure: all flows equal, to round-off of the largest term
    assert np.ptp(r.x) <= 1e-9 * np.abs(r.x).max()
    # the most precise instrument dominates: the estimate sits within a few of its u
    best = np.argmin(u)
    assert abs(r.x[0] - x[best]) <= 5 * u[best] + 1e-9 * abs(x[best])
    np.testing.assert_allclose(r.x, reference_solution(x, u, A, b), rtol=1e-9)
    assert np.all(np.sqrt(np.clip(np.diag(r.x_cov), 0, None)) <= u * (1 + 1e-9))


def test_nearly_dependent_constraints():
    rng = np.random.default_rng(3)
    A0 = rng.normal(size=(2, 6))
    third = A0[0] + A0[1] + 1e-13 * rng.normal(size=6)  # dependent to 1e-13
    A = np.vstack([A0, third])
    x_true = rng.uniform(5, 50, 6)
    b = A @ x_true
    u = np.full(6, 0.1)
    x = x_true + rng.normal(size=6) * u
    try:
        r = perftest.reconcile_linear(x, np.diag(u**2), A, b=b)
    except PerftestError as exc:  # a clear refusal is acceptable, a crash is not
        assert "constraint" in str(exc)
        return
    assert np.all(np.isfinite(r.x)) and np.isfinite(r.chi2)
    # numerically the third row adds nothing: two independent constraints
    assert r.dof == 2
    np.testing.assert_allclose(A0 @ r.x, b[:2], rtol=0, atol=1e-8 * np.abs(b).max())
    np.testing.assert_allclose(r.x, reference_solution(x, u, A0, b[:2]), rtol=1e-8)


def test_exactly_dependent_consistent_constraints():
    A0 = np.array([[1.0, -1.0, -1.0, 0.0], [0.0, 1.0, 0.0, -1.0]])
    A = np.vstack([A0, A0[0] + A0[1]])  # the overall balance, written as well
    x = np.array([100.0, 61.0, 40.0, 60.5])
    u = np.array([1.0, 0.6, 0.4, 0.6])
    r = perftest.reconcile_linear(x, np.diag(u**2), A, b=np.zeros(3))
    assert r.dof == 2
    np.testing.assert_allclose(r.x, reference_solution(x, u, A0, np.zeros(2)), rtol=1e-10)


def test_zero_flows_measured():
    # a splitter with its branches shut: flows 0 kg/s, absolute uncertainty
    A = np.array([[1.0, -1.0, -1.0]])
    x = np.array([0.0, 0.02, -0.01])
    u = np.array([0.05, 0.05, 0.05])
    r = perftest.reconcile_linear(x, np.diag(u**2), A)
    np.testing.assert_allclose(r.x, reference_solution(x, u, A, np.zeros(1)), atol=1e-15)
    assert np.all(np.isfinite(r.z[r.redundant]))


def test_zero_flow_in_a_plant_branch():
    # tests/data/model/water_network.toml with branch 2 shut (FT-2 reads 0 kg/s)
    plant = perftest.load_plant(
        Path(__file__).resolve().parents[1] / "data" / "model" / "water_network.toml"
    )
    W = get_fluid("water")
    ma, mb = 30.0, 20.0
    pa, pb, ph, po = 4.0e5, 4.1e5, 3.8e5, 3.5e5
    Ta, Tb = 293.15, 333.15
    hh = (ma * W.enthalpy_pT(pa, Ta) + mb * W.enthalpy_pT(pb, Tb)) / (ma + mb)
    Th = float(W.state_ph(ph, hh).T)
    Q = 5.0e6
    To = float(W.state_ph(po, hh + Q / (ma + mb)).T)
    truth = {
        "FT-A": ma, "FT-B": mb, "FT-H": ma + mb, "FT-1": ma + mb, "FT-2": 0.0,
        "TT-A": Ta, "TT-B": Tb, "TT-H": Th, "TT-2": Th, "TT-O": To,
        "PT-A": pa, "PT-B": pb, "PT-H": ph, "PT-O": po, "QT-1": Q, "TT-AMB": 288.0,
    }  # fmt: skip
    tags = list(truth)
    v = np.array([truth[t] for t in tags])
    u = np.array(
        [0.05 if t == "FT-2" else 0.01 * truth[t] if t[:2] in ("FT", "QT")
         else 0.2 if t[:2] == "TT" else 0.005 * truth[t] for t in tags]
    )  # fmt: skip
    m = Measurements.from_values(tags, v, u)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rec = perftest.reconcile(plant, m)
    f = rec.to_frame()
    assert np.all(np.isfinite(f["reconciled"].astype(float)))
    assert np.all(np.isfinite(f["u_reconciled"].astype(float)))
    # the true values close the balances: nothing to adjust beyond round-off
    assert rec.global_test["chi2"] < 1e-6
    np.testing.assert_allclose(
        f.set_index("tag").loc[tags, "reconciled"].astype(float), v, rtol=1e-6, atol=1e-6
    )
    # a state behind a shut branch cannot be known: it is flagged, not made up
    un = rec.unmeasured.set_index("name")
    blind = un[~un["observable"].astype(bool)]
    assert np.all(np.isnan(blind["value"].astype(float)))


@pytest.mark.parametrize(
    "tag, ptag, dT",
    [
        ("TT-121", "PT-121", +0.3),  # extraction steam 0.3 K above saturation
        ("TT-121", "PT-121", +0.05),  # inside the property layer's saturation margin
        ("TT-141", "PT-141", -0.2),  # heater drain 0.2 K subcooled
        ("TT-151", "PT-151", -0.1),  # condensate 0.1 K subcooled
    ],
)
def test_states_near_saturation_give_finite_results(demo_measurements, tag, ptag, dT):
    plant, m = demo_measurements
    W = get_fluid("water")
    v = np.array(m.value, dtype=float)
    ts = float(W.saturation_T(v[m.index(ptag)]))
    v[m.index(tag)] = ts + dT
    m2 = replace(m, value=v)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            rec = perftest.reconcile(plant, m2, eliminate=True)
            perf = perftest.evaluate(plant, rec, monte_carlo=False)
        except PerftestError as exc:
            # a clear refusal naming the stream or tag is acceptable; NaN is not
            assert tag in str(exc) or "stream" in str(exc)
            return
    res = perf.results
    for col in ("value", "u"):
        bad = list(res.index[~np.isfinite(res[col].astype(float))])
        assert bad == [], f"non-finite {col}: {bad}"


def test_no_nan_in_the_reported_demo_results(tmp_path):
    from perftest.demo import run_demo

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run_demo(tmp_path, figures=False)
    text = (tmp_path / "summary.json").read_text(encoding="utf-8")
    assert "NaN" not in text and "Infinity" not in text
    s = json.loads(text)
    for name, r in s["results"].items():
        for k in ("value", "u", "U95"):
            assert r[k] is not None, f"{name}.{k} is null"
    for g in s["guarantees"]:
        assert g["corrected_value"] is not None and g["U95"] is not None


def test_summary_refuses_to_write_nan():
    # a NaN that reaches the writer becomes an explicit null, never the token NaN
    import pandas as pd

    from perftest import report

    data = report.ReportData(
        results=pd.DataFrame(
            {"value": [np.nan], "u": [1.0], "U95": [2.0], "unit": ["W"]}, index=["net_power"]
        )
    )
    s = report.summary_json(data)
    assert s["results"]["net_power"]["value"] is None
    text = report.dumps(s)
    assert "NaN" not in text
    with pytest.raises(ValueError):
        report.dumps({"x": float("nan")})  # strict serialiser: NaN is refused
