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
from perftest.run.measurements import Measurements
from perftest.thermo.properties import get_fluid


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


def _exact_kkt(x, u, A, b, B):
    """Exact solution of the Lagrange (KKT) system of min sum((x - x_m)/u)^2 subject to
    A x + B y = b, in rational arithmetic (fractions.Fraction) from the float inputs:
    no round-off at all, so no shared factorisation and no conditioning to share."""
    from fractions import Fraction as F

    n, k, m = x.size, B.shape[1], A.shape[0]
    size = n + k + m
    M = [[F(0)] * (size + 1) for _ in range(size)]
    for i in range(n):
        w = 1 / F(u[i]) ** 2
        M[i][i], M[i][size] = w, F(x[i]) * w
    for r in range(m):
        for i in range(n):
            M[i][n + k + r] = M[n + k + r][i] = F(A[r, i])
        for j in range(k):
            M[n + j][n + k + r] = M[n + k + r][n + j] = F(B[r, j])
        M[n + k + r][size] = F(b[r])
    for c in range(size):  # Gauss-Jordan, exact
        piv = next(r for r in range(c, size) if M[r][c] != 0)
        M[c], M[piv] = M[piv], M[c]
        for r in range(size):
            if r != c and M[r][c] != 0:
                f = M[r][c] / M[c][c]
                M[r] = [a - f * e for a, e in zip(M[r], M[c], strict=True)]
    sol = np.array([float(M[i][size] / M[i][i]) for i in range(n + k)])
    return sol[:n], sol[n:]


@pytest.mark.parametrize("sparse", [False, True], ids=["dense", "sparse"])
@pytest.mark.parametrize("seed", [218, 236, 249, 360])
def test_many_decades_with_unmeasured_not_taken_for_a_contradiction(seed, sparse):
    """Random full-rank, consistent networks with two unmeasured variables and
    uncertainties spread over 6 to 7.5 decades (the draws of the property-based
    networks with up to 8 decades that failed).  The projected solve, in the metric
    of S, took a nearly parallel pair of balances for linearly dependent ones with
    disagreeing right-hand sides and refused the consistent constraints
    ("must be consistent ... misfit -77.4 standard deviations").  Now the null-space
    solve takes over and the result equals the exact solution."""
    import scipy.sparse as sp

    rng = np.random.default_rng(seed)
    n = rng.integers(3, 13)
    k = int(rng.integers(0, 3))
    m = int(rng.integers(1, max(2, n + k - 1)))
    decades = rng.uniform(0, 8)
    A = rng.normal(size=(m, n))
    B = rng.normal(size=(m, k))
    x_true, y_true = rng.uniform(1, 100, n), rng.uniform(1, 100, k)
    b = A @ x_true + B @ y_true
    u = x_true * 10.0 ** rng.uniform(-2 - decades, -2, n)
    x = x_true + rng.normal(size=n) * u
    assert k == 2 and decades > 6 and np.linalg.matrix_rank(np.hstack([A, B])) == m
    if sparse:
        r = perftest.reconcile_linear(x, sp.diags(u**2), sp.csr_matrix(A), b=b, B=sp.csr_matrix(B))
    else:
        r = perftest.reconcile_linear(x, np.diag(u**2), A, b=b, B=B)
    x_exact, y_exact = _exact_kkt(x, u, A, b, B)
    # The float result carries the round-off of x itself (a few ulp of |x| ~ 100,
    # i.e. ~1e-13, which is 1e-5 of the smallest u here): 100 ulp of |x| plus 1e-6 u.
    eps = np.finfo(float).eps
    assert np.all(np.abs(r.x - x_exact) <= 1e-6 * u + 100 * eps * np.abs(x_exact))
    np.testing.assert_allclose(r.y, y_exact, rtol=1e-10)
    assert r.observable.all() and r.dof == m - k
    # chi2 = sum((x_hat - x)/u)^2: those ~1e-5 u errors times adjustments of O(1) u
    # move it by ~1e-5; 1e-4 absolute.
    assert r.chi2 == pytest.approx(float(np.sum(((x_exact - x) / u) ** 2)), abs=1e-4)
    # the balances close to round-off
    closure = A @ r.x + B @ r.y - b
    assert np.all(np.abs(closure) <= 1e-9 * (np.abs(A) @ np.abs(r.x) + np.abs(B) @ np.abs(r.y)))


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
    f = rec.to_frame(units="si")
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


def test_null_space_solve_kept_only_when_it_closes_better(monkeypatch):
    """The linearised balances of the demo plant (one Newton step of its
    reconciliation): columns in W, J/kg and kg/s differ by ten orders of magnitude
    and a few rows hold only tiny terms.  There the projected solve closes better
    than the null-space solve, so a reconcile_linear call on the same constraints
    must keep the projected solution."""
    import perftest.balance.linear as lin
    from perftest.demo import demo_measurements

    captured = []
    solve_dense = lin.solve_dense

    def keep(p, **kw):
        captured.append(p)
        return solve_dense(p, **kw)

    monkeypatch.setattr(lin, "solve_dense", keep)
    plant, m0 = demo_measurements()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        perftest.reconcile(plant, m0)
    monkeypatch.setattr(lin, "solve_dense", solve_dense)
    chosen = 0
    for p in captured:
        core = solve_dense(p, final=True)  # as reconcile_linear solves it
        error = lin._closure_error(p, core.xhat, core.y)
        fallback = lin._solve_nullspace(p, core)
        if error <= lin.CLOSURE_RTOL or fallback is None:
            continue
        if lin._closure_error(p, fallback.xhat, fallback.y) < error:
            continue
        chosen += 1
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            r = perftest.reconcile_linear(p.x, p.S, p.A, b=p.b, B=p.B)
        np.testing.assert_array_equal(r.x, core.xhat)
    assert chosen  # the situation occurs in these steps
